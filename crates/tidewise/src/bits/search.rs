//! The search and the confirmation rounds (see the module documentation of [`super`]).

use std::collections::BTreeMap;

use tidewise_core::format::Format;
use tidewise_core::round::Rounding;

use super::journal::{Entry, Journal};
use super::point::{Knob, Point};
use super::remote::Executor;
use super::runner::{Purpose, Runner, Used};
use super::seeds::{Replicate, Role, Seeds};
use super::stats::{per_round_level, t_quantile, Bound};
use super::{
    int_bits_for, BitsError, ClassResult, GapStats, Log, Options, Recommendation, Round, RunCounts,
    Scan, ScanPoint, Splits, Step,
};
use crate::arms::{self, Prepared};
use crate::spec::{Design, Spec};

/// Share of the tolerance one class may use on its own (the rest is for the other classes'
/// losses when combined and for the confirmation's bound).
pub const CLASS_SHARE: f64 = 0.5;

fn q(m: i32, w: u8, like: Format) -> Option<Format> {
    let frac = i32::from(w) - 1 - m;
    let frac = u8::try_from(frac).ok()?;
    Format::new(w, frac)
        .ok()
        .map(|f| f.overflowing(like.overflow()))
}

/// The generous reference of a design in a network of `weight_layers` weight layers, with
/// held classes and layers at their held formats. Per-layer formats the spec gives are held
/// as given (never widened nor searched).
pub fn reference_point(design: &Design, opts: &Options, weight_layers: u8) -> Point {
    let wide = |f: Format| {
        if f.word() >= 16 {
            f
        } else {
            q(f.int_bits(), 16, f).unwrap_or(f)
        }
    };
    let spec = Point::of(design, weight_layers);
    let mut p = Point {
        forward: wide(spec.forward),
        bias: wide(spec.bias),
        feedback: wide(spec.feedback),
        act: wide(spec.act),
        ..spec
    };
    for h in &opts.holds {
        if let Some(f) = h.format {
            p = p.with(h.knob, f);
        }
    }
    let (pw, pb) = p.product_fracs();
    let need = (pw.max(pb) + 7).min(64);
    p.acc = spec.acc.max(32).max(need);
    if let Some(bits) = opts.held(Knob::Accumulator).and_then(|h| h.bits) {
        p.acc = bits;
    }
    p
}

struct Search<'r, 'a> {
    runner: &'r mut Runner<'a>,
    reps: Vec<Replicate>,
    steps: Vec<Step>,
    budget: usize,
}

impl Search<'_, '_> {
    fn runs(
        &mut self,
        p: Point,
        reps: &[Replicate],
        purpose: Purpose,
    ) -> Result<Vec<Used>, BitsError> {
        let wanted: Vec<(Point, Replicate)> = reps.iter().map(|&r| (p, r)).collect();
        self.runner.ensure(&wanted, purpose)?;
        let total = self.runner.made_or_used();
        if total > self.budget {
            return Err(BitsError::Options(format!(
                "--budget {}: the search needs more training runs than that ({total} so far); every finished run is journalled, so rerun with a larger --budget to go on",
                self.budget
            )));
        }
        self.runner
            .runs(p, reps)
            .ok_or_else(|| BitsError::Run(format!("no result for {p}")))
    }

    /// Evaluates `p` on the search replicates; `pass` decides from its statistics.
    fn eval(
        &mut self,
        stage: &'static str,
        k: Option<Knob>,
        p: Point,
        pass: &dyn Fn(&GapStats) -> bool,
        log: Log<'_>,
    ) -> Result<(GapStats, bool), BitsError> {
        let reps = self.reps.clone();
        let g = GapStats::of(&self.runs(p, &reps, Purpose::Search)?);
        let ok = pass(&g);
        let (class, word) = match k {
            Some(k) => (k.name(), p.word(k)),
            None if stage == "reference" => ("reference", p.word(Knob::Accumulator)),
            None => ("joint", p.word(Knob::Accumulator)),
        };
        log(&format!(
            "{stage:>11} {class:<16} {p}: gap {:+.2} ± {:.2} points, loss gap {:+.5} {}",
            g.mean,
            g.std,
            g.loss_gap,
            if ok { "pass" } else { "miss" }
        ));
        self.steps.push(Step {
            stage,
            class,
            point: p.to_string(),
            word_bits: word,
            gap: g.clone(),
            pass: ok,
        });
        Ok((g, ok))
    }
}

fn scan_words(lo: u8, hi: u8, step: u8, rec: u8) -> Vec<u8> {
    let mut w: Vec<u8> = (lo..=hi).step_by(usize::from(step.max(1))).collect();
    for extra in [hi, rec] {
        if (lo..=hi).contains(&extra) && !w.contains(&extra) {
            w.push(extra);
        }
    }
    w.sort_unstable();
    w
}

/// The scan's word range: `[lo, hi]` cut to three steps either side of the recommendation,
/// and its ends.
fn near(lo: u8, hi: u8, rec: u8, step: u8) -> (u8, u8) {
    let reach = 3 * step.max(1);
    (
        lo.max(rec.saturating_sub(reach)),
        hi.min(rec.saturating_add(reach)),
    )
}

/// What one class's own search settled: its integer bits (kept when it is widened).
struct Curve {
    int_bits: i32,
}

/// `chosen` with class `k` one fraction bit wider (integer bits kept). When the products gain
/// a fraction bit and the accumulator is sized (`acc_sized`: not at the reference, not held),
/// the accumulator gains a bit too, keeping its integer bits.
fn wider(
    chosen: Point,
    k: Knob,
    curves: &BTreeMap<Knob, Curve>,
    acc_sized: bool,
) -> Option<(Format, Format, Point)> {
    let old = chosen.format(k)?;
    if old.word() >= 32 {
        return None;
    }
    let new = q(curves.get(&k)?.int_bits, old.word() + 1, old)?;
    let before = chosen.product_fracs();
    let mut p = chosen.with(k, new);
    let after = p.product_fracs();
    if acc_sized && (after.0 > before.0 || after.1 > before.1) && p.acc < 64 {
        p = p.with_acc(p.acc + 1);
    }
    Some((old, new, p))
}

/// One widening step: every searched class one bit wider, each candidate run on the search
/// replicates (one batch), and the candidate with the smallest paired **test-loss** gap
/// taken. The loss is ranked, not accuracy: it moves smoothly with the word, where a few
/// hundred test samples' accuracy moves in steps and noise, so a step is chosen by what it
/// does to the design, not by which replicate was lucky. With `must_improve`, nothing is
/// widened unless the best candidate lowers the loss gap of `current` (else widening would
/// be chasing accuracy noise).
#[allow(clippy::type_complexity)]
fn widen_step(
    s: &mut Search<'_, '_>,
    chosen: &mut Point,
    current: &GapStats,
    curves: &BTreeMap<Knob, Curve>,
    acc_sized: bool,
    must_improve: bool,
    log: Log<'_>,
) -> Result<Option<(Knob, Format, Format, GapStats)>, BitsError> {
    let cands: Vec<(Knob, Format, Format, Point)> = curves
        .keys()
        .filter_map(|&k| wider(*chosen, k, curves, acc_sized).map(|(o, n, p)| (k, o, n, p)))
        .collect();
    let reps = s.reps.clone();
    let wanted: Vec<(Point, Replicate)> = cands
        .iter()
        .flat_map(|c| reps.iter().map(move |&r| (c.3, r)))
        .collect();
    s.runner.ensure(&wanted, Purpose::Search)?;
    let mut best: Option<(Knob, Format, Format, Point, GapStats)> = None;
    for (k, o, n, p) in cands {
        let g = GapStats::of(&s.runs(p, &reps, Purpose::Search)?);
        log(&format!(
            "  candidate {:<16} {p}: loss gap {:+.5}, gap {:+.2}",
            k.name(),
            g.loss_gap,
            g.mean
        ));
        s.steps.push(Step {
            stage: "candidate",
            class: k.name(),
            point: p.to_string(),
            word_bits: p.word(k),
            gap: g.clone(),
            pass: false,
        });
        let better = best.as_ref().is_none_or(|b| {
            g.loss_gap < b.4.loss_gap || (g.loss_gap == b.4.loss_gap && g.mean < b.4.mean)
        });
        if better {
            best = Some((k, o, n, p, g));
        }
    }
    let Some((k, o, n, p, g)) = best else {
        return Ok(None);
    };
    if must_improve && g.loss_gap >= current.loss_gap {
        log(&format!(
            "  no candidate lowers the loss gap {:+.5}: stop widening",
            current.loss_gap
        ));
        return Ok(None);
    }
    if let Some(st) = s
        .steps
        .iter_mut()
        .rev()
        .find(|st| st.point == p.to_string())
    {
        st.stage = "widen";
        st.pass = true;
    }
    *chosen = p;
    Ok(Some((k, o, n, g)))
}

/// The bound a confirmation round of `n_c` replicates would give for `g`, with the larger of
/// its sd and `sd` (the sd a round measured, when there was one).
fn predicted(g: &GapStats, sd: Option<f64>, t_c: f64, n_c: usize) -> f64 {
    g.mean + t_c * sd.unwrap_or(g.std).max(g.std) / (n_c as f64).sqrt()
}

/// Widening until the search replicates predict a pass.
struct Widening {
    tol: f64,
    t_c: f64,
    n_c: usize,
    max_widen: u32,
}

impl Widening {
    /// Widens `chosen` one bit at a time ([`widen_step`]) while its predicted bound is
    /// above the tolerance, at most `max_widen` times; returns whether it ends predicting a
    /// pass.
    #[allow(clippy::too_many_arguments)]
    fn run(
        &self,
        s: &mut Search<'_, '_>,
        curves: &BTreeMap<Knob, Curve>,
        chosen: &mut Point,
        jg: &mut GapStats,
        sd: Option<f64>,
        acc_sized: bool,
        widened: &mut u32,
        notes: &mut Vec<String>,
        log: Log<'_>,
    ) -> Result<bool, BitsError> {
        let (tol, t_c, n_c) = (self.tol, self.t_c, self.n_c);
        let pass = |g: &GapStats| predicted(g, sd, t_c, n_c) <= tol + 1e-9;
        let mut ok = pass(jg);
        let mut steps = 0;
        while !ok && steps < self.max_widen {
            let before = jg.clone();
            let Some((k, old, wider, g)) =
                widen_step(s, chosen, &before, curves, acc_sized, false, log)?
            else {
                break;
            };
            steps += 1;
            *widened += 1;
            let p = pass(&g);
            notes.push(format!(
                "predicted bound {:+.2} > {tol:.2} (mean {:+.2}, loss gap {:+.5} on the search replicates): widened {} from {old} to {wider} (of one-bit candidates, the smallest loss gap {:+.5}): mean {:+.2}, predicted bound {:+.2}",
                predicted(&before, sd, t_c, n_c),
                before.mean,
                before.loss_gap,
                k.name(),
                g.loss_gap,
                g.mean,
                predicted(&g, sd, t_c, n_c)
            ));
            *jg = g;
            ok = p;
        }
        Ok(ok)
    }
}

/// Runs the search for `spec` on `prepared` (see the module documentation).
#[allow(clippy::too_many_arguments)]
pub fn search(
    spec: &Spec,
    design: &Design,
    prepared: &Prepared,
    opts: &Options,
    executor: Executor,
    journal: Option<(Journal, Vec<Entry>)>,
    log: Log<'_>,
) -> Result<Recommendation, BitsError> {
    opts.validate()?;
    let plan = arms::plan(spec, design, prepared)?;
    let weight_layers = u8::try_from(plan.layers()).unwrap_or(u8::MAX);
    opts.check_layers(weight_layers)?;
    let n_test = prepared.test.len();
    let grain = 100.0 / n_test.max(1) as f64;
    let vary = match opts.splits {
        Splits::Auto => grain > CLASS_SHARE * opts.tolerance,
        Splits::Fixed => false,
        Splits::Vary => true,
    };
    let splits_note = match (opts.splits, vary) {
        (Splits::Auto, true) => format!(
            "one test sample is worth {grain:.2} points ({n_test} test samples), more than half the tolerance {:.2}: every replicate has its own stratified split (split seeds derived from run.seed){}",
            opts.tolerance,
            if spec.data.source == "pump" { "; the pump generator also makes its samples from the split seed" } else { "" }
        ),
        (Splits::Auto, false) => format!(
            "one test sample is worth {grain:.2} points ({n_test} test samples), at most half the tolerance: every replicate uses the spec's split (data.split_seed = {})",
            spec.data.split_seed
        ),
        (Splits::Fixed, _) => format!(
            "--splits fixed: every replicate uses the spec's split (data.split_seed = {}); one test sample is worth {grain:.2} points",
            spec.data.split_seed
        ),
        (Splits::Vary, _) => "--splits vary: every replicate has its own stratified split".into(),
    };
    log(&splits_note);
    let mut seeds = Seeds::new(spec.run.seed, spec.data.split_seed, vary);
    let search_reps = seeds.take(Role::Search, opts.search_seeds as usize);
    let confirm_sets: Vec<Vec<Replicate>> = (0..opts.rounds)
        .map(|r| seeds.take(Role::Confirm(r), opts.confirm_seeds as usize))
        .collect();
    let recheck_reps = seeds.take(Role::Recheck, opts.recheck as usize);
    let level = per_round_level(opts.confidence, opts.rounds);
    let n_c = opts.confirm_seeds as usize;
    let t_c = t_quantile(level, (n_c - 1) as f64).unwrap_or(f64::INFINITY);
    let tol = opts.tolerance;

    let mut runner = Runner::new(spec, design, prepared, opts.jobs, executor, journal)?;
    if runner.resumed > 0 {
        log(&format!(
            "resuming: {} finished runs read from the journal",
            runner.resumed
        ));
    }
    log(&format!(
        "float reference: {} search replicate(s), {} epochs each",
        search_reps.len(),
        spec.run.epochs
    ));
    let ranges = runner.floats(&search_reps, true)?;
    let float_accuracy: Vec<f64> = search_reps
        .iter()
        .filter_map(|&r| runner.float(r).map(|o| o.accuracy()))
        .collect();
    let reference = reference_point(design, opts, weight_layers);
    log(&format!(
        "reference (the other classes while one is searched): {reference}"
    ));
    let has_feedback = plan.counts().feedback_weights > 0;
    let mut s = Search {
        runner: &mut runner,
        reps: search_reps.clone(),
        steps: Vec::new(),
        budget: opts.budget,
    };
    let class_pass = |g: &GapStats| predicted(g, None, t_c, n_c) <= CLASS_SHARE * tol + 1e-9;
    let predicted = |g: &GapStats, sd: Option<f64>| predicted(g, sd, t_c, n_c);
    let joint_pass = |g: &GapStats| predicted(g, None) <= tol + 1e-9;
    let widening = Widening {
        tol,
        t_c,
        n_c,
        max_widen: opts.max_widen,
    };

    let mut notes = Vec::new();
    let (ref_gap, ref_pass) = s.eval("reference", None, reference, &joint_pass, log)?;
    if !ref_pass {
        notes.push(format!(
            "the reference design itself ({reference}) has a gap of {:+.2} ± {:.2} points on the search replicates, predicting a bound of {:+.2} above the tolerance: the limit lies in the classes held at the spec's or held formats, in the training itself, or in the spread over the replicates",
            ref_gap.mean, ref_gap.std, predicted(&ref_gap, None)
        ));
    }

    // 1. One class at a time.
    let mut chosen = reference;
    let mut classes = Vec::new();
    let mut curves: BTreeMap<Knob, Curve> = BTreeMap::new();
    let mut generous: BTreeMap<Knob, u8> = BTreeMap::new();
    let mut full_grid: u64 = u64::from(opts.search_seeds);
    let mut one_class: u64 = 0;
    // With --per-layer, forward weights and activations are searched layer by layer.
    let mut knobs = Vec::new();
    for base in [
        Knob::ForwardWeights,
        Knob::Biases,
        Knob::FeedbackWeights,
        Knob::Activations,
    ] {
        let layered = opts.per_layer && matches!(base, Knob::ForwardWeights | Knob::Activations);
        if layered && opts.held(base).is_none() {
            knobs.extend(
                Knob::layers_of(base, weight_layers).filter_map(|l| Knob::at_layer(base, l)),
            );
        } else {
            knobs.push(base);
        }
    }
    for k in knobs {
        let Some(ref_fmt) = reference.format(k) else {
            continue;
        };
        let observed = match k.base() {
            Knob::ForwardWeights => ranges.forward_weights,
            Knob::Biases => ranges.biases,
            Knob::FeedbackWeights => ranges.feedback_weights,
            _ => ranges.activations,
        };
        let fixed_result =
            |used: bool, held: bool, note: String, gap: Option<GapStats>| ClassResult {
                class: k,
                used,
                searched: false,
                held,
                word_bits: ref_fmt.word(),
                int_bits: ref_fmt.int_bits(),
                frac_bits: ref_fmt.frac(),
                format: ref_fmt.to_string(),
                observed_max: used.then_some(observed),
                gap,
                note,
            };
        if k == Knob::FeedbackWeights && !has_feedback {
            classes.push(fixed_result(
                false,
                opts.held(k).is_some(),
                format!("rule {} keeps no feedback weights", plan.rule.name()),
                None,
            ));
            continue;
        }
        if opts.held(k).is_some() {
            classes.push(fixed_result(
                true,
                true,
                format!("held at {ref_fmt} (--hold)"),
                None,
            ));
            continue;
        }
        let spec_layers = if k.layer().is_some() {
            reference.overridden(k)
        } else {
            reference.all_overridden(k)
        };
        if spec_layers {
            classes.push(fixed_result(
                true,
                true,
                format!("held at {ref_fmt}: per-layer format(s) given in the spec"),
                None,
            ));
            continue;
        }
        let w_gen = ref_fmt.word().max(16);
        generous.insert(k, w_gen);
        let m_obs = int_bits_for(observed).clamp(i32::from(w_gen) - 41, i32::from(w_gen) - 2);
        let (m_lo, m_hi) = (
            (m_obs - 2).max(i32::from(w_gen) - 41),
            (m_obs + 3).min(i32::from(w_gen) - 2),
        );
        let candidates: u64 = (m_lo..=m_hi)
            .map(|m| u64::from(w_gen) - (m + 2).max(2) as u64 + 1)
            .sum();
        full_grid = full_grid.saturating_mul(candidates);
        one_class += candidates;
        let at = |m: i32, w: u8| q(m, w, ref_fmt).map(|f| reference.with(k, f));
        let probe = |s: &mut Search, m: i32, log: Log<'_>| -> Result<bool, BitsError> {
            match at(m, w_gen) {
                Some(p) => {
                    let (_, pass) = s.eval("range", Some(k), p, &class_pass, log)?;
                    Ok(pass)
                }
                None => Ok(false),
            }
        };
        // Never fewer integer bits than the float arm's range needs: a narrower range
        // saturates values the float arm did reach, which a few search replicates may not
        // show but a confirmation round does (a seed or two whose training collapses).
        let mut m = m_obs;
        let mut found = probe(&mut s, m, log)?;
        if !found {
            for up in 1..=3 {
                if m_obs + up > m_hi {
                    break;
                }
                if probe(&mut s, m_obs + up, log)? {
                    m = m_obs + up;
                    found = true;
                    break;
                }
            }
        }
        if !found {
            let note = format!(
                "no integer-bit count from {} to {} reached half the tolerance at {w_gen} bits: kept the reference {ref_fmt}",
                m_obs,
                (m_obs + 3).min(m_hi)
            );
            log(&format!("{}: {note}", k.name()));
            let g = s
                .runner
                .runs(reference, &search_reps)
                .map(|r| GapStats::of(&r));
            curves.insert(
                k,
                Curve {
                    int_bits: ref_fmt.int_bits(),
                },
            );
            classes.push(fixed_result(true, false, note, g));
            continue;
        }
        // Bisect the word with m fixed: the shortest passing word in [m + 2, w_gen].
        let mut lo = u8::try_from((m + 2).max(2)).unwrap_or(2).min(w_gen);
        let mut hi = w_gen;
        while lo < hi {
            let mid = lo + (hi - lo) / 2;
            let Some(p) = at(m, mid) else { break };
            let (_, pass) = s.eval("width", Some(k), p, &class_pass, log)?;
            if pass {
                hi = mid;
            } else {
                lo = mid + 1;
            }
        }
        let fmt = q(m, hi, ref_fmt).unwrap_or(ref_fmt);
        chosen = chosen.with(k, fmt);
        let gap = s
            .runner
            .runs(reference.with(k, fmt), &search_reps)
            .map(|r| GapStats::of(&r));
        curves.insert(k, Curve { int_bits: m });
        classes.push(ClassResult {
            class: k,
            used: true,
            searched: true,
            held: false,
            word_bits: fmt.word(),
            int_bits: fmt.int_bits(),
            frac_bits: fmt.frac(),
            format: fmt.to_string(),
            observed_max: Some(observed),
            gap,
            note: format!(
                "integer bits {m} (observed range gave {m_obs}), word bisected in [{}, {w_gen}]",
                (m + 2).max(2)
            ),
        });
    }

    // Layers held on their own (`--hold CLASS.LAYER=FORMAT`) get a row too.
    for h in opts.holds.iter().filter(|h| h.knob.layer().is_some()) {
        if classes.iter().any(|c| c.class == h.knob) {
            continue;
        }
        let Some(f) = reference.format(h.knob) else {
            continue;
        };
        classes.push(ClassResult {
            class: h.knob,
            used: true,
            searched: false,
            held: true,
            word_bits: f.word(),
            int_bits: f.int_bits(),
            frac_bits: f.frac(),
            format: f.to_string(),
            observed_max: None,
            gap: None,
            note: format!("held at {f} (--hold)"),
        });
    }

    // 2. Jointly: widen (ranked by the loss) until the search replicates predict a pass.
    let (mut jg, mut jpass) = s.eval("joint", None, chosen, &joint_pass, log)?;
    let mut widened = 0;
    if !jpass {
        jpass = widening.run(
            &mut s,
            &curves,
            &mut chosen,
            &mut jg,
            None,
            false,
            &mut widened,
            &mut notes,
            log,
        )?;
    }
    if jpass && widened == 0 {
        notes.push(format!(
            "all classes at their recommendations at once: mean gap {:+.2} on the search replicates, predicted bound {:+.2} ≤ {tol:.2}, no widening needed",
            jg.mean,
            predicted(&jg, None)
        ));
    } else if !jpass {
        notes.push(format!(
            "after {widened} widening step(s) the search replicates still predict a bound of {:+.2} above the tolerance; confirming anyway",
            predicted(&jg, None)
        ));
    }
    for c in classes.iter_mut() {
        if let Some(f) = chosen.format(c.class) {
            if c.used && f.word() != c.word_bits {
                c.note
                    .push_str(&format!("; widened to {f} by the joint search"));
            }
        }
    }

    // 3. The accumulator, with the others at their recommendations.
    let (pw, pb) = chosen.product_fracs();
    let widest = if has_feedback { pw.max(pb) } else { pw };
    let acc_ref = reference.acc;
    let acc_lo = (widest + 1).clamp(2, acc_ref);
    let acc_held = opts.held(Knob::Accumulator).is_some();
    let acc_candidates = u64::from(acc_ref - acc_lo) + 1;
    full_grid = full_grid.saturating_mul(acc_candidates);
    one_class += acc_candidates;
    let acc_note = if acc_held {
        format!("held at {acc_ref} bits (--hold)")
    } else if jpass {
        let (mut lo, mut hi) = (acc_lo, acc_ref);
        while lo < hi {
            let mid = lo + (hi - lo) / 2;
            let (_, pass) = s.eval(
                "accumulator",
                Some(Knob::Accumulator),
                chosen.with_acc(mid),
                &joint_pass,
                log,
            )?;
            if pass {
                hi = mid;
            } else {
                lo = mid + 1;
            }
        }
        chosen = chosen.with_acc(hi);
        format!("bisected in [{acc_lo}, {acc_ref}] with the other classes at their recommendations")
    } else {
        format!("kept the reference {acc_ref} bits: the joint design missed before the accumulator search")
    };
    let search_acc_gap = s
        .runner
        .runs(chosen, &search_reps)
        .map(|r| GapStats::of(&r));

    // 4. Confirmation rounds on fresh replicates.
    let mut rounds = Vec::new();
    let mut accepted = false;
    for (r, reps) in confirm_sets.iter().enumerate() {
        let runs = s.runs(chosen, reps, Purpose::Confirm)?;
        let gaps: Vec<f64> = runs.iter().map(Used::gap).collect();
        let bound = Bound::of(&gaps, level);
        let ok = bound.accepts(tol);
        let g = GapStats::of(&runs);
        log(&format!(
            "    confirm round {} {chosen}: mean {:+.2}, sd {:.2}, {:.1}% upper bound {:+.2} over {} fresh replicates: {}",
            r + 1,
            bound.mean,
            bound.sd,
            100.0 * level,
            bound.upper,
            bound.n,
            if ok { "accepted" } else { "not accepted" }
        ));
        s.steps.push(Step {
            stage: "confirm",
            class: "joint",
            point: chosen.to_string(),
            word_bits: chosen.acc,
            gap: g.clone(),
            pass: ok,
        });
        notes.push(format!(
            "confirmation round {} on {} fresh replicates: mean gap {:+.2}, sd {:.2}, one-sided {:.2}% upper bound {:+.2} {} the tolerance {tol:.2}: {}",
            r + 1,
            bound.n,
            bound.mean,
            bound.sd,
            100.0 * level,
            bound.upper,
            if ok { "≤" } else { ">" },
            if ok { "accepted" } else { "not accepted" }
        ));
        rounds.push(Round {
            round: r as u32 + 1,
            point: chosen.to_string(),
            replicates: reps.clone(),
            bound,
            accepted: ok,
            gap: g,
        });
        if ok {
            accepted = true;
            break;
        }
        if r + 1 < confirm_sets.len() {
            // Widen at least one step, then on while the search replicates predict a miss
            // and some class still costs loss.
            // Every searched class one fraction bit wider and the accumulator one integer bit
            // wider (a failed round says the design as a whole is short, not which class),
            // then the loss-ranked widening while the search replicates predict a miss.
            let before = chosen;
            let mut moved = Vec::new();
            for &k in curves.keys() {
                if let Some((old, new, p)) = wider(chosen, k, &curves, !acc_held) {
                    chosen = p;
                    moved.push(format!("{} {old} → {new}", k.name()));
                }
            }
            if !acc_held && chosen.acc < 64 {
                let acc = chosen.acc;
                chosen = chosen.with_acc(acc + 1);
                moved.push(format!("accumulator {acc} → {} bits", acc + 1));
            }
            if chosen == before {
                break;
            }
            widened += 1;
            let mut g = GapStats::of(&s.runs(chosen, &search_reps, Purpose::Search)?);
            notes.push(format!(
                "for round {}: every searched class one bit wider ({}): mean {:+.2}, loss gap {:+.5} on the search replicates",
                r + 2,
                moved.join(", "),
                g.mean,
                g.loss_gap
            ));
            widening.run(
                &mut s,
                &curves,
                &mut chosen,
                &mut g,
                None,
                !acc_held,
                &mut widened,
                &mut notes,
                log,
            )?;
        }
    }
    if !accepted {
        notes.push(format!(
            "no design was accepted in {} round(s): the recommendation below is the last design confirmed, NOT within the tolerance at {:.0}% confidence; allow more rounds (--rounds), more replicates per round (--confirm-seeds), a larger tolerance, or hold fewer classes",
            rounds.len(),
            100.0 * opts.confidence
        ));
    }

    // The re-check: reported, never used to decide.
    let recheck = if recheck_reps.is_empty() {
        None
    } else {
        let runs = s.runs(chosen, &recheck_reps, Purpose::Recheck)?;
        let gaps: Vec<f64> = runs.iter().map(Used::gap).collect();
        let bound = Bound::of(&gaps, opts.confidence);
        log(&format!(
            "    re-check {chosen}: mean {:+.2}, sd {:.2}, {:.0}% upper bound {:+.2} over {} further fresh replicates",
            bound.mean, bound.sd, 100.0 * opts.confidence, bound.upper, bound.n
        ));
        Some(Round {
            round: 0,
            point: chosen.to_string(),
            replicates: recheck_reps.clone(),
            accepted: bound.accepts(tol),
            bound,
            gap: GapStats::of(&runs),
        })
    };

    for c in classes.iter_mut() {
        if let Some(f) = chosen.format(c.class) {
            if c.used {
                c.word_bits = f.word();
                c.int_bits = f.int_bits();
                c.frac_bits = f.frac();
                c.format = f.to_string();
            }
        }
    }
    let (pw, pb) = chosen.product_fracs();
    let acc_m = i32::from(chosen.acc) - 1 - i32::from(pw);
    classes.push(ClassResult {
        class: Knob::Accumulator,
        used: true,
        searched: jpass && !acc_held,
        held: acc_held,
        word_bits: chosen.acc,
        int_bits: acc_m,
        frac_bits: pw,
        format: format!("Q{acc_m}.{pw}"),
        observed_max: None,
        gap: search_acc_gap,
        note: format!(
            "{acc_note}; fraction of the W·h products {pw}{}",
            if has_feedback {
                format!(", of the feedback products {pb}")
            } else {
                String::new()
            }
        ),
    });
    let steps = std::mem::take(&mut s.steps);
    let search_gap = GapStats::of(&s.runs(chosen, &search_reps, Purpose::Search)?);
    drop(s);

    // The scan for the plot, over the search replicates (cached runs reused).
    let mut scans = Vec::new();
    if opts.scan {
        let roundings: Vec<Rounding> =
            if opts.scan_nearest && reference.rounding != Rounding::NearestEven {
                vec![reference.rounding, Rounding::NearestEven]
            } else {
                vec![reference.rounding]
            };
        let mut wanted: Vec<(Knob, Rounding, u8, Point)> = Vec::new();
        for c in classes.iter().filter(|c| c.used && !c.held) {
            let k = c.class;
            for &r in &roundings {
                if k == Knob::Accumulator {
                    let (lo, hi) = near(acc_lo, acc_ref, chosen.acc, opts.scan_step);
                    for w in scan_words(lo, hi, opts.scan_step, chosen.acc) {
                        wanted.push((k, r, w, chosen.with_acc(w).rounded(r)));
                    }
                } else {
                    let (Some(ref_fmt), Some(&w_gen)) = (reference.format(k), generous.get(&k))
                    else {
                        continue;
                    };
                    let m = curves.get(&k).map_or(ref_fmt.int_bits(), |c| c.int_bits);
                    let lo = u8::try_from((m + 2).max(2)).unwrap_or(2).min(w_gen);
                    let rec = c.word_bits.min(w_gen);
                    let (lo, hi) = near(lo, w_gen, rec, opts.scan_step);
                    for w in scan_words(lo, hi, opts.scan_step, rec) {
                        if let Some(f) = q(m, w, ref_fmt) {
                            wanted.push((k, r, w, reference.with(k, f).rounded(r)));
                        }
                    }
                }
            }
        }
        let runs: Vec<(Point, Replicate)> = wanted
            .iter()
            .flat_map(|w| search_reps.iter().map(move |&s| (w.3, s)))
            .collect();
        log(&format!(
            "scan for the plot: {} design points × {} replicate(s) (cached runs reused)",
            wanted.len(),
            search_reps.len()
        ));
        runner.ensure(&runs, Purpose::Scan)?;
        let order: Vec<Knob> = classes.iter().map(|c| c.class).collect();
        for k in order {
            for &r in &roundings {
                let points: Vec<ScanPoint> = wanted
                    .iter()
                    .filter(|w| w.0 == k && w.1 == r)
                    .filter_map(|w| {
                        let runs = runner.runs(w.3, &search_reps)?;
                        let acc: Vec<f64> = runs.iter().map(|u| u.fixed.accuracy()).collect();
                        let b = Bound::of(&acc, 0.95);
                        Some(ScanPoint {
                            word_bits: w.2,
                            mean: b.mean,
                            std: b.sd,
                            min: acc.iter().copied().fold(f64::INFINITY, f64::min),
                            max: acc.iter().copied().fold(f64::NEG_INFINITY, f64::max),
                        })
                    })
                    .collect();
                if !points.is_empty() {
                    scans.push(Scan {
                        class: k,
                        rounding: r.name(),
                        points,
                    });
                }
            }
        }
    }
    let scan_float = float_accuracy.iter().sum::<f64>() / float_accuracy.len().max(1) as f64;
    Ok(Recommendation {
        tolerance: tol,
        confidence: opts.confidence,
        round_level: level,
        max_rounds: opts.rounds,
        rounding: reference.rounding.name(),
        test_samples: n_test,
        vary_splits: vary,
        splits_note,
        search_replicates: search_reps,
        reference,
        point: chosen,
        design: chosen.apply(design),
        float_accuracy,
        ranges,
        classes,
        search_gap,
        rounds,
        accepted,
        recheck,
        notes,
        steps,
        scans,
        scan_float,
        runs: RunCounts {
            search_fixed: runner.count(Purpose::Search),
            confirm_fixed: runner.count(Purpose::Confirm),
            recheck_fixed: runner.count(Purpose::Recheck),
            scan_fixed: runner.count(Purpose::Scan),
            float: runner.float_count(),
            full_grid,
            one_class_grid: one_class.saturating_mul(u64::from(opts.search_seeds)),
        },
        run_log: runner.used.clone(),
    })
}
