//! The hardware hand-off: a chosen design written out for an RTL team, as a SystemVerilog
//! package and a C header of its constants, and bit-exact golden vectors of its first
//! training steps in `$readmemh` memory files (IEEE 1364-2005, 17.2.9), indexed by a JSON
//! manifest; and the replay check that re-runs those steps with the core from the files
//! and compares every word.
//!
//! The vectors come from the same training path every command uses (`train::train_sample`
//! on the fixed back end) through [`record::Recorder`], a back end that delegates to the
//! fixed one and writes down each multiply-accumulate and each row update with its operand
//! formats ([`trace`]). The exported steps are the first `N` samples of the first epoch in
//! its shuffled order, each a full step (forward pass, output target, feedback training,
//! targets, forward update); a spec's warm-up epochs are not applied to them.

pub mod memfile;
pub mod params;
pub mod record;
pub mod trace;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use anyhow::{bail, Context, Result};
use serde::{Deserialize, Serialize};
use tidewise_core::backend::{container_bits, Fixed, Word};
use tidewise_core::class::{Class, Tag};
use tidewise_core::network::Net;
use tidewise_core::plan::{Plan, Shape};
use tidewise_core::rng::Stream;
use tidewise_core::train::{self, Schedule, Streams};

use crate::arms::{self, DataEncoder, Prepared};
use crate::io::{claim_dir, write_atomic};
use crate::spec::{self, Design, Spec};
use record::Recorder;

/// Name of the manifest in an export folder.
pub const MANIFEST: &str = "manifest.json";
/// The spec of the exported design, as the replay check reads it.
pub const DESIGN: &str = "design.toml";
/// Version tag of the folder layout.
pub const LAYOUT_VERSION: &str = "tidewise-vectors-1";
/// Default number of exported steps.
pub const DEFAULT_STEPS: usize = 4;

/// One memory file: a tensor, either once (`steps == 0`) or once per step, step after step.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FileEntry {
    /// File name inside the folder.
    pub file: String,
    /// What it holds.
    pub tensor: String,
    /// Tensor class (its formats), or `label` / `trace`.
    pub class: String,
    /// Layer (weights and biases 1..=L, activations 0..=L, feedback the hidden layer).
    pub layer: Option<usize>,
    /// Fixed-point format of its words (`-` for labels and the trace).
    pub format: String,
    /// Bits per word.
    pub width: u32,
    /// Number of words (the `$readmemh` depth).
    pub depth: usize,
    /// Steps held (0: a tensor written once).
    pub steps: usize,
    /// Index of each step's first word, and the depth last (empty when `steps == 0`).
    pub step_offsets: Vec<usize>,
}

/// `manifest.json`: what the folder holds.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Manifest {
    /// [`LAYOUT_VERSION`].
    pub layout: String,
    /// Hash of the exported spec (`tidewise train`'s folder mark).
    pub spec_hash: String,
    /// The rule.
    pub rule: String,
    /// Layer sizes, input first.
    pub sizes: Vec<usize>,
    /// Run seed.
    pub seed: u64,
    /// Exported steps.
    pub steps: usize,
    /// Storage container of the words in the core (8, 16 or 32 bits).
    pub container_bits: u32,
    /// Index of each step's sample in the training split.
    pub samples: Vec<u32>,
    /// Whether the spec's warm-up epochs were applied (never: every step is a full step).
    pub warmup_applied: bool,
    /// `train::digest` of the parameters before the first and after the last step.
    pub digest_initial: String,
    /// See `digest_initial`.
    pub digest_final: String,
    /// Record layouts of `trace.mem`.
    pub trace_layout: Vec<String>,
    /// The memory files.
    pub files: Vec<FileEntry>,
}

/// A tensor's words with its entry.
#[derive(Clone, Debug, PartialEq)]
pub struct Tensor {
    /// Its manifest entry.
    pub entry: FileEntry,
    /// Its words.
    pub words: Vec<i64>,
}

/// Everything the export writes as memory files, plus the digests.
#[derive(Clone, Debug, PartialEq)]
pub struct Vectors {
    /// The tensors in manifest order.
    pub tensors: Vec<Tensor>,
    /// Digest before the first step.
    pub digest_initial: u64,
    /// Digest after the last step.
    pub digest_final: u64,
    /// Raw words of the constants.
    pub consts: params::RawConsts,
    /// Records per step: `(mac, update)`.
    pub records: (usize, usize),
}

/// Why a design cannot be exported, or `Ok`: every design the core accepts can be (words of
/// 2 to 32 bits and accumulators of 2 to 64 fit the 64-bit trace words and the package's
/// `int`s), so this only guards the layout's assumptions.
pub fn check_design(design: &Design) -> Result<()> {
    let cfg = &design.fixed;
    if cfg.acc_bits > 64 {
        bail!(
            "fixed.accumulator = {}: the trace holds registers of at most 64 bits",
            cfg.acc_bits
        );
    }
    Ok(())
}

/// Reads the export's input: a spec (TOML), or a `recommendation.json` of `tidewise bits`,
/// whose `recommended.toml` beside it is the design. Returns the spec, design and the path
/// of the spec file read.
pub fn load_input(path: &Path, sets: &[String]) -> Result<(Spec, Design, PathBuf)> {
    let is_json = path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("json"));
    let spec_path = if is_json {
        let text = std::fs::read_to_string(path)
            .with_context(|| format!("cannot read {}", path.display()))?;
        let v: serde_json::Value = serde_json::from_str(&text).with_context(|| {
            format!(
                "{} is not JSON (expected a recommendation.json of `tidewise bits`)",
                path.display()
            )
        })?;
        if v.get("spec_hash").is_none() || v.get("decision").is_none() {
            bail!(
                "{} is JSON but not a recommendation of `tidewise bits` (no spec_hash and decision fields)",
                path.display()
            );
        }
        let beside = path.with_file_name("recommended.toml");
        if !beside.exists() {
            bail!(
                "{} has no recommended.toml beside it ({}): `tidewise bits` writes both",
                path.display(),
                beside.display()
            );
        }
        beside
    } else {
        path.to_path_buf()
    };
    let (spec, design) = spec::load(&spec_path, sets)?;
    Ok((spec, design, spec_path))
}

fn entry(
    file: String,
    tensor: String,
    class: &str,
    layer: Option<usize>,
    format: String,
    width: u32,
) -> FileEntry {
    FileEntry {
        file,
        tensor,
        class: class.into(),
        layer,
        format,
        width,
        depth: 0,
        steps: 0,
        step_offsets: Vec::new(),
    }
}

/// Collects one tensor per step.
struct PerStep {
    entry: FileEntry,
    words: Vec<i64>,
}

impl PerStep {
    fn new(e: FileEntry) -> PerStep {
        let mut entry = e;
        entry.step_offsets.push(0);
        PerStep {
            entry,
            words: Vec::new(),
        }
    }
    fn push(&mut self, words: impl IntoIterator<Item = i64>) {
        self.words.extend(words);
        self.entry.steps += 1;
        self.entry.step_offsets.push(self.words.len());
    }
    fn done(mut self) -> Tensor {
        self.entry.depth = self.words.len();
        Tensor {
            entry: self.entry,
            words: self.words,
        }
    }
}

fn once(mut e: FileEntry, words: Vec<i64>) -> Tensor {
    e.depth = words.len();
    Tensor { entry: e, words }
}

fn get<W: Word>(v: &[W]) -> Vec<i64> {
    v.iter().map(|w| w.get()).collect()
}

/// The entries of the parameters that change per step, in [`state_words`]' order.
fn state_entries(design: &Design, plan: &Plan, prefix: &str) -> Vec<FileEntry> {
    let cfg = &design.fixed;
    let mut out = Vec::new();
    let f = |t: Tag| cfg.format(t);
    for l in 1..=plan.layers() {
        let (w, b) = (f(Tag::weights(l)), f(Tag::bias(l)));
        out.push(entry(
            format!("{prefix}w{l}.mem"),
            format!("W_{l} (row-major, {} x {})", plan.n(l), plan.n(l - 1)),
            Class::Forward.name(),
            Some(l),
            w.to_string(),
            u32::from(w.word()),
        ));
        out.push(entry(
            format!("{prefix}b{l}.mem"),
            format!("b_{l}"),
            Class::Bias.name(),
            Some(l),
            b.to_string(),
            u32::from(b.word()),
        ));
    }
    let fbf = cfg.classes[Class::Feedback.index()].format;
    if plan.counts().feedback_weights > 0 {
        out.push(entry(
            format!("{prefix}feedback.mem"),
            "feedback weights then feedback biases of every hidden layer, in plan order".into(),
            Class::Feedback.name(),
            None,
            fbf.to_string(),
            u32::from(fbf.word()),
        ));
    }
    out
}

fn state_words<W: Word>(net: &Net<'_, W>) -> Vec<Vec<i64>> {
    let plan = net.plan;
    let mut out = Vec::new();
    for l in 1..=plan.layers() {
        out.push(get(net.w.get(plan.w_range(l)).unwrap_or(&[])));
        out.push(get(net.b.get(plan.node_range(l)).unwrap_or(&[])));
    }
    if plan.counts().feedback_weights > 0 {
        let mut fb = get(net.fw);
        fb.extend(get(net.fb));
        out.push(fb);
    }
    out
}

/// Runs `samples` (input words, label) through full training steps from `net`'s state,
/// recording every tensor: the one path export and replay share.
fn run_steps<W: Word>(
    be: Fixed<W>,
    design: &Design,
    net: &mut Net<'_, W>,
    samples: &[(Vec<W>, u16)],
    mut noise: Stream,
) -> Vectors {
    let cfg = &design.fixed;
    let plan = net.plan;
    let f = |t: Tag| cfg.format(t);
    let in_f = f(Tag::act(0));
    let mut tensors = vec![
        once(
            entry(
                "inputs.mem".into(),
                format!("input h_0 of each step ({} words a step)", plan.n(0)),
                Class::Act.name(),
                Some(0),
                in_f.to_string(),
                u32::from(in_f.word()),
            ),
            samples.iter().flat_map(|(x, _)| get(x)).collect(),
        ),
        once(
            entry(
                "labels.mem".into(),
                "class label of each step".into(),
                "label",
                None,
                "-".into(),
                16,
            ),
            samples.iter().map(|(_, y)| i64::from(*y)).collect(),
        ),
    ];
    for (e, w) in state_entries(design, &plan, "init_")
        .into_iter()
        .zip(state_words(net))
    {
        tensors.push(once(e, w));
    }
    let digest_initial = train::digest::<Fixed<W>>(net);
    let mut layer_sets: Vec<PerStep> = Vec::new();
    for l in 1..=plan.layers() {
        let a = f(Tag::act(l));
        let (name, w) = (a.to_string(), u32::from(a.word()));
        layer_sets.push(PerStep::new(entry(
            format!("h{l}.mem"),
            format!("layer output h_{l}"),
            Class::Act.name(),
            Some(l),
            name.clone(),
            w,
        )));
        layer_sets.push(PerStep::new(entry(
            format!("d{l}.mem"),
            format!("displacement d_{l} = target - h_{l}"),
            Class::Act.name(),
            Some(l),
            name.clone(),
            w,
        )));
        layer_sets.push(PerStep::new(entry(
            format!("delta{l}.mem"),
            format!("local error delta_{l}"),
            Class::Act.name(),
            Some(l),
            name,
            w,
        )));
    }
    let mut after: Vec<PerStep> = state_entries(design, &plan, "")
        .into_iter()
        .map(PerStep::new)
        .collect();
    let sf = cfg.classes[Class::Step.index()].format;
    let mut steps = PerStep::new(entry(
        "step.mem".into(),
        "step register eta*delta of every row update, in order".into(),
        Class::Step.name(),
        None,
        sf.to_string(),
        u32::from(sf.word()),
    ));
    let mut ops = PerStep::new(entry(
        "trace.mem".into(),
        "operation trace: every multiply-accumulate and row update (see trace_layout)".into(),
        "trace",
        None,
        "-".into(),
        64,
    ));
    let schedule = Schedule {
        rule: design.rule,
        feedback_steps: design.hyper.feedback_steps,
    };
    let mut rec = Recorder::new(be, *cfg);
    let mut counts = (0, 0);
    for (x, label) in samples {
        rec.take();
        train::train_sample(
            net,
            &mut rec,
            &schedule,
            x,
            usize::from(*label),
            &mut noise,
            false,
        );
        let records = rec.take();
        for (l, sets) in (1..=plan.layers()).zip(layer_sets.chunks_exact_mut(3)) {
            let r = plan.node_range(l);
            let bufs = [
                net.h.get(plan.h_range(l)),
                net.d.get(r.clone()),
                net.delta.get(r),
            ];
            for (set, buf) in sets.iter_mut().zip(bufs) {
                set.push(get(buf.unwrap_or(&[])));
            }
        }
        for (set, w) in after.iter_mut().zip(state_words(net)) {
            set.push(w);
        }
        steps.push(
            records
                .iter()
                .filter_map(|r| match r {
                    record::Record::Update(u) => Some(u.step),
                    record::Record::Dot(_) => None,
                })
                .collect::<Vec<_>>(),
        );
        let mut words = Vec::new();
        trace::encode(cfg, &records, &mut words);
        ops.push(words);
        let (m, u) = trace::counts(&records);
        counts = (counts.0 + m, counts.1 + u);
    }
    ops.words.push(trace::END);
    if let Some(last) = ops.entry.step_offsets.last_mut() {
        *last = ops.words.len();
    }
    tensors.extend(layer_sets.into_iter().map(PerStep::done));
    tensors.extend(after.into_iter().map(PerStep::done));
    tensors.push(steps.done());
    tensors.push(ops.done());
    let k = &net.k;
    Vectors {
        tensors,
        digest_initial,
        digest_final: train::digest::<Fixed<W>>(net),
        consts: params::RawConsts {
            lr: k.lr.get(),
            lr_feedback: k.lr_feedback.get(),
            decay: k.decay.get(),
            beta: k.beta.get(),
            noise_amp: k.noise_amp.get(),
        },
        records: counts,
    }
}

/// The vectors of `steps` steps of `spec`, and each step's sample index.
fn compute<W: Word>(
    spec: &Spec,
    design: &Design,
    prepared: &Prepared,
    plan: Plan,
    steps: usize,
) -> Result<(Vectors, Vec<u32>)> {
    let seed = spec.run.seed;
    let mut be = arms::fixed_backend::<W>(design, seed)?;
    let mut enc = be.data_encoder(design, seed);
    let x = arms::encode(&mut enc, &prepared.train);
    let n0 = plan.n(0);
    let mut arena = vec![W::default(); plan.counts().total()];
    let (mut net, _) = arms::start(&mut be, design, plan, prepared, &mut arena, seed)?;
    let mut streams = Streams::new(seed);
    let n = prepared.train.len();
    let mut order: Vec<u32> = (0..n as u32).collect();
    train::shuffle(&mut order, &mut streams.order);
    order.truncate(steps);
    let samples: Vec<(Vec<W>, u16)> = order
        .iter()
        .map(|&i| {
            let i = i as usize;
            let row = x.get(i * n0..(i + 1) * n0).unwrap_or(&[]).to_vec();
            (row, prepared.train.labels.get(i).copied().unwrap_or(0))
        })
        .collect();
    Ok((
        run_steps(be, design, &mut net, &samples, streams.noise),
        order,
    ))
}

/// What an export wrote.
#[derive(Clone, Debug)]
pub struct Exported {
    /// The manifest written.
    pub manifest: Manifest,
    /// Multiply-accumulate and row-update records in the trace.
    pub records: (usize, usize),
}

/// Writes the export of `spec` for `steps` steps into `dir`.
pub fn export(
    spec: &Spec,
    design: &Design,
    dir: &Path,
    steps: usize,
    force: bool,
) -> Result<Exported> {
    if steps == 0 {
        bail!("--steps 0: the export needs at least 1 training step");
    }
    check_design(design)?;
    let prepared = arms::prepare(spec)?;
    let n = prepared.train.len();
    if steps > n {
        bail!(
            "--steps {steps} is more than the {n} samples of the training split (one step per sample of the first epoch): allowed 1 to {n}"
        );
    }
    let plan = arms::plan(spec, design, &prepared)?;
    let bits = container_bits(&design.fixed);
    let (v, order) = match bits {
        8 => compute::<i8>(spec, design, &prepared, plan, steps)?,
        16 => compute::<i16>(spec, design, &prepared, plan, steps)?,
        _ => compute::<i32>(spec, design, &prepared, plan, steps)?,
    };
    let sizes: Vec<usize> = (0..=plan.layers()).map(|l| plan.n(l)).collect();
    let manifest = Manifest {
        layout: LAYOUT_VERSION.into(),
        spec_hash: spec.hash(),
        rule: spec.rule.name.clone(),
        sizes,
        seed: spec.run.seed,
        steps,
        container_bits: bits,
        samples: order,
        warmup_applied: false,
        digest_initial: format!("{:016x}", v.digest_initial),
        digest_final: format!("{:016x}", v.digest_final),
        trace_layout: trace::LAYOUT.iter().map(|s| s.to_string()).collect(),
        files: v.tensors.iter().map(|t| t.entry.clone()).collect(),
    };
    let p = params::Params {
        cfg: &design.fixed,
        plan: &plan,
        rule: &spec.rule.name,
        rate_shift: design.rate_shift,
        consts: v.consts,
        feedback_steps: design.hyper.feedback_steps,
        steps,
        seed: spec.run.seed,
    };
    // Everything is computed before the folder is touched; then each file is written
    // atomically and the manifest, which names them, last.
    let mut files: Vec<(String, String)> = vec![
        (DESIGN.into(), spec.to_toml()),
        (format!("{}.sv", params::PACKAGE), params::package(&p)),
        (params::HEADER.into(), params::header(&p)),
    ];
    for t in &v.tensors {
        let e = &t.entry;
        let comment = format!(
            "{}: {} ({} words of {} bits, format {})",
            e.file, e.tensor, e.depth, e.width, e.format
        );
        files.push((e.file.clone(), memfile::write(&t.words, e.width, &comment)));
    }
    files.push(("README.md".into(), folder_readme(&manifest, &v)));
    let json = serde_json::to_string_pretty(&manifest)? + "\n";
    let dir = claim_dir(dir, &spec.hash(), force)?;
    for (name, text) in files {
        write_atomic(&dir.join(name), text.as_bytes())?;
    }
    write_atomic(&dir.join(MANIFEST), json.as_bytes())?;
    Ok(Exported {
        manifest,
        records: v.records,
    })
}

/// The folder's README: the layout in the tool's words.
fn folder_readme(m: &Manifest, v: &Vectors) -> String {
    let mut s = format!(
        "# Golden vectors of one fixed-point design\n\n\
         Written by `tidewise export`: rule `{}`, layers {:?}, seed {}, {} training steps \
         (samples {:?} of the training split, the first of the first epoch's shuffled order; \
         every step is a full step: forward pass, output target, feedback training, targets, \
         forward update, with no warm-up).\n\n\
         - `tw_design_pkg.sv`: the constants as a SystemVerilog package (`import tw_design_pkg::*;`).\n\
         - `tw_design.h`: the same constants for C firmware.\n\
         - `design.toml`: the spec these vectors were made from.\n\
         - `*.mem`: raw two's-complement words in hex, one per line, for `$readmemh`; \
           a file with steps holds step 0's words first, then step 1's, and so on; \
           `manifest.json` gives each file's depth, width, format and step offsets.\n\
         - `trace.mem`: every multiply-accumulate ({} records) and row update ({} records) of \
           the steps with its operands' formats, 64-bit words:\n\n",
        m.rule, m.sizes, m.seed, m.steps, m.samples, v.records.0, v.records.1
    );
    for l in &m.trace_layout {
        s.push_str(&format!("  - {l}\n"));
    }
    s.push_str(
        "\n  Rounding codes: 0 floor, 1 nearest-even, 2 stochastic; overflow codes: 0 saturate, \
         1 wrap. A result is formed exactly, rounded once by an arithmetic right shift of \
         `frac_in - frac_out` bits and then saturated or wrapped into its word; the \
         accumulator applies its policy after every addition.\n\n\
         Check the files: `tidewise export --check THIS_FOLDER` re-runs the steps with the \
         tidewise core from `inputs.mem`, `labels.mem` and the `init_*` files and compares every word.\n\n\
         These vectors verify arithmetic equivalence with the tidewise model, word for word; \
         they say nothing about timing, area or a synthesised circuit.\n\n\
         | file | tensor | format | width | depth | steps |\n|---|---|---|---|---|---|\n",
    );
    for f in &m.files {
        s.push_str(&format!(
            "| `{}` | {} | {} | {} | {} | {} |\n",
            f.file, f.tensor, f.format, f.width, f.depth, f.steps
        ));
    }
    s
}

/// The outcome of a replay check.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct CheckReport {
    /// Files compared.
    pub files: usize,
    /// Words compared.
    pub words: usize,
    /// Steps re-run.
    pub steps: usize,
}

/// Reads the vectors in `dir` back and re-runs their steps with the core; any word that
/// differs is an error naming the file, the word and both values.
pub fn check(dir: &Path) -> Result<CheckReport> {
    let mpath = dir.join(MANIFEST);
    let text = std::fs::read_to_string(&mpath).with_context(|| {
        format!(
            "cannot read {}: is {} an export folder?",
            mpath.display(),
            dir.display()
        )
    })?;
    let m: Manifest = serde_json::from_str(&text)
        .with_context(|| format!("{} is not a manifest of `tidewise export`", mpath.display()))?;
    if m.layout != LAYOUT_VERSION {
        bail!(
            "{}: layout {:?}, this build reads {LAYOUT_VERSION:?}",
            mpath.display(),
            m.layout
        );
    }
    let spec_text = std::fs::read_to_string(dir.join(DESIGN))
        .with_context(|| format!("cannot read {}", dir.join(DESIGN).display()))?;
    let (_, design) =
        spec::parse(&spec_text, &[]).with_context(|| format!("{}", dir.join(DESIGN).display()))?;
    check_design(&design)?;
    let mut read: BTreeMap<String, Vec<i64>> = BTreeMap::new();
    for f in &m.files {
        let p = dir.join(&f.file);
        let t =
            std::fs::read_to_string(&p).with_context(|| format!("cannot read {}", p.display()))?;
        let words = memfile::read(&t, f.width, &f.file)?;
        if words.len() != f.depth {
            bail!(
                "{}: {} words, the manifest says {}",
                f.file,
                words.len(),
                f.depth
            );
        }
        read.insert(f.file.clone(), words);
    }
    let shape =
        Shape::new(&m.sizes).map_err(|e| anyhow::anyhow!("manifest sizes {:?}: {e}", m.sizes))?;
    let plan = Plan::new(shape, design.rule, design.hidden, design.output);
    let v = match container_bits(&design.fixed) {
        8 => replay::<i8>(&design, plan, &m, &read)?,
        16 => replay::<i16>(&design, plan, &m, &read)?,
        _ => replay::<i32>(&design, plan, &m, &read)?,
    };
    let mut words = 0;
    for t in &v.tensors {
        let e = &t.entry;
        let Some(got) = read.get(&e.file) else {
            bail!(
                "{}: the replay writes this file but the manifest does not list it",
                e.file
            );
        };
        if got.len() != t.words.len() {
            bail!(
                "{}: {} words in the file, the replay gives {}",
                e.file,
                got.len(),
                t.words.len()
            );
        }
        if let Some(i) = got.iter().zip(&t.words).position(|(a, b)| a != b) {
            let step = e
                .step_offsets
                .windows(2)
                .position(|w| i >= w[0] && i < w[1]);
            bail!(
                "{}: word {i}{} is {:#x} in the file, the core computes {:#x} ({})",
                e.file,
                step.map_or(String::new(), |s| format!(" (step {s})")),
                memfile::pattern(got[i], e.width),
                memfile::pattern(t.words[i], e.width),
                e.tensor
            );
        }
        words += got.len();
    }
    // The package and the header must still say what the design is.
    let p = params::Params {
        cfg: &design.fixed,
        plan: &plan,
        rule: &m.rule,
        rate_shift: design.rate_shift,
        consts: v.consts,
        feedback_steps: design.hyper.feedback_steps,
        steps: m.steps,
        seed: m.seed,
    };
    for (name, want) in [
        (format!("{}.sv", params::PACKAGE), params::package(&p)),
        (params::HEADER.to_string(), params::header(&p)),
    ] {
        let path = dir.join(&name);
        let got = std::fs::read_to_string(&path)
            .with_context(|| format!("cannot read {}", path.display()))?;
        if let Some((i, (g, w))) = got
            .lines()
            .zip(want.lines())
            .enumerate()
            .find(|(_, (g, w))| g != w)
        {
            bail!("{name} line {}: {g:?}, the design gives {w:?}", i + 1);
        }
        if got.lines().count() != want.lines().count() {
            bail!(
                "{name}: {} lines, the design gives {}",
                got.lines().count(),
                want.lines().count()
            );
        }
    }
    let digest = format!("{:016x}", v.digest_final);
    if digest != m.digest_final {
        bail!(
            "final digest {digest} differs from the manifest's {}",
            m.digest_final
        );
    }
    Ok(CheckReport {
        files: v.tensors.len(),
        words,
        steps: m.steps,
    })
}

fn replay<W: Word>(
    design: &Design,
    plan: Plan,
    m: &Manifest,
    read: &BTreeMap<String, Vec<i64>>,
) -> Result<Vectors> {
    let file = |name: &str| {
        read.get(name)
            .with_context(|| format!("the manifest lists no {name}"))
    };
    let inputs = file("inputs.mem")?;
    let labels = file("labels.mem")?;
    let n0 = plan.n(0);
    if inputs.len() != m.steps * n0 || labels.len() != m.steps {
        bail!(
            "inputs.mem / labels.mem hold {} / {} words; {} steps of {n0} inputs need {} / {}",
            inputs.len(),
            labels.len(),
            m.steps,
            m.steps * n0,
            m.steps
        );
    }
    let mut be = Fixed::<W>::new(design.fixed, m.seed).map_err(|e| anyhow::anyhow!("{e}"))?;
    let mut arena = vec![W::default(); plan.counts().total()];
    // The seeded start draws what the export's start drew, so the streams are where they were.
    let mut net = train::setup(plan, &design.hyper, &mut arena, &mut be, m.seed)
        .map_err(|e| anyhow::anyhow!("{e}"))?;
    let init = state_entries(design, &plan, "init_");
    let mut words: Vec<Vec<i64>> = Vec::new();
    for e in &init {
        words.push(file(&e.file)?.clone());
    }
    load_state(&mut net, &words)?;
    let samples: Vec<(Vec<W>, u16)> = inputs
        .chunks_exact(n0.max(1))
        .zip(labels)
        .map(|(x, &y)| (x.iter().map(|&v| W::put(v)).collect(), y as u16))
        .collect();
    Ok(run_steps(
        be,
        design,
        &mut net,
        &samples,
        Streams::new(m.seed).noise,
    ))
}

/// Puts the words of [`state_words`]' layout into `net`.
fn load_state<W: Word>(net: &mut Net<'_, W>, words: &[Vec<i64>]) -> Result<()> {
    let plan = net.plan;
    let mut it = words.iter();
    let mut put = |dst: &mut [W], what: &str| -> Result<()> {
        let src = it
            .next()
            .with_context(|| format!("no initial words for {what}"))?;
        if src.len() != dst.len() {
            bail!(
                "initial {what}: {} words, the network has {}",
                src.len(),
                dst.len()
            );
        }
        for (d, &s) in dst.iter_mut().zip(src) {
            *d = W::put(s);
        }
        Ok(())
    };
    for l in 1..=plan.layers() {
        put(&mut net.w[plan.w_range(l)], &format!("W_{l}"))?;
        put(&mut net.b[plan.node_range(l)], &format!("b_{l}"))?;
    }
    if plan.counts().feedback_weights > 0 {
        let nfw = net.fw.len();
        let mut both: Vec<W> = vec![W::default(); nfw + net.fb.len()];
        put(&mut both, "feedback weights")?;
        net.fw.copy_from_slice(&both[..nfw]);
        net.fb.copy_from_slice(&both[nfw..]);
    }
    Ok(())
}
