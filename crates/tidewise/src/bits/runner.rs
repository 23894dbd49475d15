//! Runs of the search: the float reference once per replicate, fixed-arm runs cached by
//! design point and replicate (runs are deterministic, so a cached result is the result), in
//! parallel here or on the sweep machinery or a Slurm array job ([`super::remote`]), every
//! finished run journalled ([`super::journal`]) and read back on the next call.

use std::collections::HashMap;
use std::sync::Arc;

use rayon::prelude::*;
use serde::Serialize;

use super::journal::{Entry, Journal};
use super::observe::{RangeObserver, Ranges};
use super::point::Point;
use super::remote::{self, Executor};
use super::seeds::Replicate;
use super::BitsError;
use crate::arms::{self, ArmResult, NoObserver, Prepared};
use crate::spec::{Design, Spec};

/// Test samples the range observer runs at each float checkpoint.
const OBSERVED_SAMPLES: usize = 512;

/// What the search keeps of one run (either arm).
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Outcome {
    /// Test samples classified right after the last epoch.
    pub correct: u32,
    /// Test samples.
    pub tested: u32,
    /// Mean test loss after the last epoch.
    pub loss: f64,
    /// Saturation events, all epochs.
    pub saturations: u64,
    /// Updates lost to rounding, all epochs.
    pub lost_updates: u64,
    /// Updates attempted, all epochs.
    pub updates: u64,
}

impl Outcome {
    /// Final test accuracy in percent.
    pub fn accuracy(&self) -> f64 {
        100.0 * f64::from(self.correct) / f64::from(self.tested.max(1))
    }

    /// The outcome of an arm's result on a test split of `tested` samples.
    pub fn of(r: &ArmResult, tested: usize) -> Outcome {
        Outcome {
            correct: (r.test_accuracy * tested as f64).round() as u32,
            tested: tested as u32,
            loss: r.test_loss,
            saturations: r.saturations,
            lost_updates: r.lost_updates,
            updates: r.updates,
        }
    }
}

/// Why runs were made.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Purpose {
    /// Exploring candidates on the search replicates.
    Search,
    /// The accuracy-against-width plot.
    Scan,
    /// A confirmation round.
    Confirm,
    /// The re-check on further fresh replicates.
    Recheck,
}

/// One fixed-arm run the command used, with its paired float run.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Used {
    /// Why.
    pub purpose: Purpose,
    /// The design point.
    pub point: Point,
    /// The seeds.
    pub rep: Replicate,
    /// The fixed arm.
    pub fixed: Outcome,
    /// The float arm of the same replicate.
    pub float: Outcome,
}

impl Used {
    /// The paired accuracy gap, points (float − fixed).
    pub fn gap(&self) -> f64 {
        self.float.accuracy() - self.fixed.accuracy()
    }
    /// The paired test-loss gap (fixed − float).
    pub fn loss_gap(&self) -> f64 {
        self.fixed.loss - self.float.loss
    }
}

/// The run cache, the worker pool and the journal.
pub struct Runner<'a> {
    spec: &'a Spec,
    design: &'a Design,
    data: HashMap<u64, Arc<Prepared>>,
    pool: rayon::ThreadPool,
    jobs: usize,
    executor: Executor,
    journal: Option<Journal>,
    float: HashMap<Replicate, (Outcome, Option<Ranges>)>,
    fixed: HashMap<(Point, Replicate), Outcome>,
    seen: std::collections::HashSet<(Point, Replicate)>,
    float_used: std::collections::HashSet<Replicate>,
    /// Every fixed run used, in the order first asked for.
    pub used: Vec<Used>,
    /// Runs read back from the journal at the start.
    pub resumed: usize,
    /// Runs made by this call.
    pub made: usize,
}

impl<'a> Runner<'a> {
    /// A runner with `jobs` worker threads, journalling into `journal` when given.
    pub fn new(
        spec: &'a Spec,
        design: &'a Design,
        prepared: &Prepared,
        jobs: usize,
        executor: Executor,
        journal: Option<(Journal, Vec<Entry>)>,
    ) -> Result<Runner<'a>, BitsError> {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(jobs)
            .build()
            .map_err(|e| BitsError::Options(format!("cannot start {jobs} worker threads: {e}")))?;
        let mut data = HashMap::new();
        data.insert(spec.data.split_seed, Arc::new(prepared.clone()));
        let mut r = Runner {
            spec,
            design,
            data,
            pool,
            jobs,
            executor,
            journal: None,
            float: HashMap::new(),
            fixed: HashMap::new(),
            seen: Default::default(),
            float_used: Default::default(),
            used: Vec::new(),
            resumed: 0,
            made: 0,
        };
        if let Some((j, entries)) = journal {
            r.resumed = entries.len();
            for e in entries {
                match e.point {
                    None => {
                        r.float.insert(e.rep, (e.outcome, e.ranges));
                    }
                    Some(p) => {
                        r.fixed.insert((p, e.rep), e.outcome);
                    }
                }
            }
            r.journal = Some(j);
        }
        Ok(r)
    }

    /// The spec of replicate `rep`.
    pub fn spec_for(spec: &Spec, rep: Replicate) -> Spec {
        let mut s = spec.clone();
        s.run.seed = rep.seed;
        s.data.split_seed = rep.split;
        s
    }

    /// The data of split seed `split`, prepared once.
    fn prepare(&mut self, splits: impl IntoIterator<Item = u64>) -> Result<(), BitsError> {
        for split in splits {
            if !self.data.contains_key(&split) {
                let s = Self::spec_for(
                    self.spec,
                    Replicate {
                        seed: self.spec.run.seed,
                        split,
                    },
                );
                let p = arms::prepare(&s)
                    .map_err(|e| BitsError::Run(format!("data of split seed {split}: {e}")))?;
                self.data.insert(split, Arc::new(p));
            }
        }
        Ok(())
    }

    fn record(&self, e: &Entry) -> Result<(), BitsError> {
        match &self.journal {
            Some(j) => j.append(e),
            None => Ok(()),
        }
    }

    /// Runs the float arm of every replicate not run yet (observing value ranges when
    /// `observe`), and returns the ranges of those observed.
    pub fn floats(&mut self, reps: &[Replicate], observe: bool) -> Result<Ranges, BitsError> {
        self.float_used.extend(reps.iter().copied());
        let todo: Vec<Replicate> = reps
            .iter()
            .copied()
            .filter(|r| {
                self.float
                    .get(r)
                    .is_none_or(|(_, rg)| observe && rg.is_none())
            })
            .collect();
        self.prepare(todo.iter().map(|r| r.split))?;
        let (spec, design, data) = (self.spec, self.design, &self.data);
        let journal = &self.journal;
        let results: Vec<Result<Entry, BitsError>> = self.pool.install(|| {
            todo.par_iter()
                .with_max_len(1)
                .map(|&rep| {
                    let s = Self::spec_for(spec, rep);
                    let prepared = &data[&rep.split];
                    let mut obs = RangeObserver::new(OBSERVED_SAMPLES);
                    let r = if observe {
                        arms::run_float(&s, design, prepared, &mut obs, &mut |_, _, _| {})
                    } else {
                        arms::run_float(&s, design, prepared, &mut NoObserver, &mut |_, _, _| {})
                    }
                    .map_err(|e| {
                        BitsError::Run(format!(
                            "float arm, seed {} split {}: {e}",
                            rep.seed, rep.split
                        ))
                    })?;
                    let e = Entry {
                        point: None,
                        rep,
                        outcome: Outcome::of(&r, prepared.test.len()),
                        ranges: observe.then_some(obs.ranges),
                    };
                    if let Some(j) = journal {
                        j.append(&e)?;
                    }
                    Ok(e)
                })
                .collect()
        });
        for r in results {
            let e = r?;
            self.made += 1;
            self.float.insert(e.rep, (e.outcome, e.ranges));
        }
        let mut ranges = Ranges::default();
        for r in reps {
            if let Some((_, Some(rg))) = self.float.get(r) {
                ranges = ranges.max(*rg);
            }
        }
        Ok(ranges)
    }

    /// The float arm's outcome of `rep` (after [`Runner::floats`]).
    pub fn float(&self, rep: Replicate) -> Option<Outcome> {
        self.float.get(&rep).map(|(o, _)| *o)
    }

    /// Makes sure every `(point, replicate)` has been run (and its float arm), running the
    /// missing ones on the executor; records them as used for `purpose`.
    pub fn ensure(
        &mut self,
        wanted: &[(Point, Replicate)],
        purpose: Purpose,
    ) -> Result<(), BitsError> {
        let reps: Vec<Replicate> = wanted.iter().map(|w| w.1).collect();
        self.floats(&reps, false)?;
        let mut missing: Vec<(Point, Replicate)> = Vec::new();
        for &k in wanted {
            if !self.fixed.contains_key(&k) && !missing.contains(&k) {
                missing.push(k);
            }
        }
        if !missing.is_empty() {
            self.prepare(missing.iter().map(|m| m.1.split))?;
            let done = match &self.executor {
                Executor::Local => self.run_local(&missing)?,
                remote => {
                    let journal_dir = self.journal.as_ref().map(|j| j.dir().to_path_buf());
                    remote::run(
                        remote,
                        journal_dir.as_deref(),
                        self.spec,
                        &missing,
                        self.jobs,
                        &|rep: Replicate| self.data.get(&rep.split).map_or(0, |d| d.test.len()),
                        &|rep: Replicate| self.float(rep),
                    )?
                }
            };
            for e in done {
                if !matches!(self.executor, Executor::Local) {
                    self.record(&e)?;
                }
                self.made += 1;
                if let Some(p) = e.point {
                    self.fixed.insert((p, e.rep), e.outcome);
                }
            }
        }
        for &(p, rep) in wanted {
            if self.seen.insert((p, rep)) {
                let (Some(&fixed), Some(float)) = (self.fixed.get(&(p, rep)), self.float(rep))
                else {
                    return Err(BitsError::Run(format!(
                        "no result for {p}, seed {} split {}",
                        rep.seed, rep.split
                    )));
                };
                self.used.push(Used {
                    purpose,
                    point: p,
                    rep,
                    fixed,
                    float,
                });
            }
        }
        Ok(())
    }

    fn run_local(&self, missing: &[(Point, Replicate)]) -> Result<Vec<Entry>, BitsError> {
        let (spec, design, data) = (self.spec, self.design, &self.data);
        let journal = &self.journal;
        let results: Vec<Result<Entry, BitsError>> = self.pool.install(|| {
            missing
                .par_iter()
                .with_max_len(1)
                .map(|&(p, rep)| {
                    let s = Self::spec_for(spec, rep);
                    let d = p.apply(design);
                    let prepared = &data[&rep.split];
                    let r = arms::run_fixed(&s, &d, prepared, &mut NoObserver, &mut |_, _, _| {})
                        .map_err(|e| {
                        BitsError::Run(format!(
                            "fixed arm {p}, seed {} split {}: {e}",
                            rep.seed, rep.split
                        ))
                    })?;
                    let e = Entry {
                        point: Some(p),
                        rep,
                        outcome: Outcome::of(&r, prepared.test.len()),
                        ranges: None,
                    };
                    if let Some(j) = journal {
                        j.append(&e)?;
                    }
                    Ok(e)
                })
                .collect()
        });
        results.into_iter().collect()
    }

    /// The runs of `p` over `reps` (all cached), in `reps` order.
    pub fn runs(&self, p: Point, reps: &[Replicate]) -> Option<Vec<Used>> {
        reps.iter()
            .map(|&rep| {
                Some(Used {
                    purpose: Purpose::Search,
                    point: p,
                    rep,
                    fixed: *self.fixed.get(&(p, rep))?,
                    float: self.float(rep)?,
                })
            })
            .collect()
    }

    /// Distinct float runs used.
    pub fn float_count(&self) -> usize {
        self.float_used.len()
    }

    /// Distinct runs (both arms) used so far: what the budget counts.
    pub fn made_or_used(&self) -> usize {
        self.used.len() + self.float_used.len()
    }

    /// Distinct fixed runs used, by purpose.
    pub fn count(&self, purpose: Purpose) -> usize {
        self.used.iter().filter(|u| u.purpose == purpose).count()
    }
}
