//! One spec trained on a board and compared with the host: pack the job, check that it
//! fits, train the host arms for the reference, build the firmware with the job, run it
//! under QEMU and compare every figure.

use std::path::Path;
use std::time::Duration;

use serde::Serialize;
use serde_json::{json, Value};
use tidewise_core::backend::container_bits;
use tidewise_core::class::Class;

use crate::arms::{self, Comparison, NoObserver};
use crate::memory::Memory;
use crate::spec::{Design, Spec};

use super::compare::{self, BoardRun, Difference};
use super::job::{self, Packed};
use super::macs::{self, Macs};
use super::{Board, Footprint, OnchipError, Report};

/// Memory a job needs on a board, estimated before building.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Budget {
    /// The network's arena: the core's value count times the container size.
    pub arena_bytes: u64,
    /// The order buffer: 4 bytes per training sample.
    pub order_bytes: u64,
    /// The board's stack allowance: the thread stack region the firmware is built with.
    pub stack_bytes: u64,
    /// The main stack kept above the statics for the exception handlers.
    pub handler_stack_bytes: u64,
    /// The board's allowance for other statics.
    pub other_static_bytes: u64,
    /// Sum of the above.
    pub ram_need: u64,
    /// The board's RAM.
    pub ram_have: u64,
    /// The job blob (header, data, checksum).
    pub job_bytes: u64,
    /// The data arrays inside it.
    pub data_bytes: u64,
    /// The board's code allowance.
    pub code_bytes: u64,
    /// Sum of job and code.
    pub flash_need: u64,
    /// The board's flash.
    pub flash_have: u64,
}

/// The budget of `packed` on `board`.
pub fn budget(board: &Board, packed: &Packed) -> Budget {
    let words = packed.plan.counts().total() as u64;
    let arena_bytes = words * u64::from(packed.container_bits / 8);
    let order_bytes = 4 * u64::from(packed.header.train_samples);
    let ram_need = arena_bytes
        + order_bytes
        + board.stack_allowance
        + super::HANDLER_STACK_BYTES
        + board.static_allowance;
    let job_bytes = packed.bytes.len() as u64;
    Budget {
        arena_bytes,
        order_bytes,
        stack_bytes: board.stack_allowance,
        handler_stack_bytes: super::HANDLER_STACK_BYTES,
        other_static_bytes: board.static_allowance,
        ram_need,
        ram_have: board.ram_bytes,
        job_bytes,
        data_bytes: packed.data_bytes as u64,
        code_bytes: board.code_allowance,
        flash_need: job_bytes + board.code_allowance,
        flash_have: board.flash_bytes,
    }
}

impl Budget {
    /// Refuses a job that cannot fit, naming what takes the memory.
    pub fn check(&self, board: &Board, packed: &Packed) -> Result<(), OnchipError> {
        let sizes: Vec<String> = packed
            .plan
            .shape
            .sizes()
            .iter()
            .map(|n| n.to_string())
            .collect();
        if self.ram_need > self.ram_have {
            return Err(OnchipError::JobTooLarge {
                board: board.name.to_string(),
                memory: "RAM",
                need: self.ram_need,
                have: self.ram_have,
                detail: format!(
                    "arena {} for the {} network's {} {}-bit words, order buffer {} for {} training samples, thread stack {}, handler stack {}, other statics {}",
                    self.arena_bytes,
                    sizes.join("-"),
                    packed.plan.counts().total(),
                    packed.container_bits,
                    self.order_bytes,
                    packed.header.train_samples,
                    self.stack_bytes,
                    self.handler_stack_bytes,
                    self.other_static_bytes
                ),
                advice: "use a smaller network (net.hidden), narrower formats, or fewer training samples (data.max_train)",
            });
        }
        if self.flash_need > self.flash_have {
            return Err(OnchipError::JobTooLarge {
                board: board.name.to_string(),
                memory: "flash",
                need: self.flash_need,
                have: self.flash_have,
                detail: format!(
                    "job {} of which data {} ({} train and {} test samples of {} {}-bit features), code allowance {}",
                    self.job_bytes,
                    self.data_bytes,
                    packed.header.train_samples,
                    packed.header.test_samples,
                    packed.plan.n(0),
                    packed.container_bits,
                    self.code_bytes
                ),
                advice: "use fewer samples (data.max_train, data.max_test) or 8-bit formats",
            });
        }
        Ok(())
    }
}

/// Checks that the spec's formats fit the board's widest container.
pub fn check_container(board: &Board, design: &Design) -> Result<(), OnchipError> {
    let need = container_bits(&design.fixed);
    if need <= board.max_container_bits {
        return Ok(());
    }
    let wide: Vec<String> = [
        Class::Forward,
        Class::Bias,
        Class::Feedback,
        Class::Act,
        Class::Rate,
        Class::Noise,
    ]
    .iter()
    .filter_map(|&c| {
        let w = design.fixed.widest_word(c);
        (u32::from(w) > board.max_container_bits).then(|| format!("{} is {w} bits", c.name()))
    })
    .collect();
    Err(OnchipError::Container {
        board: board.name.to_string(),
        need,
        max: board.max_container_bits,
        detail: wide.join(", "),
    })
}

/// Packs the job of `spec` for `board` and checks, before anything is built, that its
/// formats, data and network fit the board.
pub fn prepare(
    spec: &Spec,
    design: &Design,
    board: &Board,
) -> Result<(arms::Prepared, Packed, Budget), OnchipError> {
    check_container(board, design)?;
    let prepared = arms::prepare(spec).map_err(|e| OnchipError::Host {
        message: e.to_string(),
    })?;
    let packed = job::pack(spec, design, &prepared)?;
    let budget = budget(board, &packed);
    budget.check(board, &packed)?;
    Ok((prepared, packed, budget))
}

/// Everything one board run produced.
#[derive(Clone, Debug)]
pub struct Outcome {
    /// The board.
    pub board: Board,
    /// The host's two arms (the fixed arm is the reference).
    pub host: Comparison,
    /// The job.
    pub packed: Packed,
    /// The estimate checked before building.
    pub budget: Budget,
    /// The firmware image.
    pub elf: std::path::PathBuf,
    /// Its sections.
    pub footprint: Footprint,
    /// What the board reported.
    pub run: BoardRun,
    /// The first difference from the host, if any.
    pub difference: Option<Difference>,
    /// MACs of one training step.
    pub macs: Macs,
    /// The emulator's output.
    pub stdout: String,
}

/// Trains `spec` on `board` (firmware sources in `boards_dir`) and compares it with the
/// host's fixed arm.
pub fn train(
    spec: &Spec,
    design: &Design,
    board: &Board,
    boards_dir: &Path,
    timeout: Duration,
) -> Result<Outcome, OnchipError> {
    let (prepared, packed, budget) = prepare(spec, design, board)?;
    let host =
        arms::run(spec, design, &prepared, &mut NoObserver, &mut |_, _, _| {}).map_err(|e| {
            OnchipError::Host {
                message: e.to_string(),
            }
        })?;
    // Job files live beside the image copies, named after their contents.
    let jobs = boards_dir.join("target").join("jobs");
    std::fs::create_dir_all(&jobs).map_err(|err| OnchipError::Io {
        path: jobs.clone(),
        action: "cannot create the folder for job files",
        err,
    })?;
    let job_path = jobs.join(format!("{:016x}.bin", super::fnv1a64(&packed.bytes)));
    // Unique per call, so two threads packing the same job (two boards, say) do not share
    // one partial file and race on its rename.
    static WRITES: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);
    let n = WRITES.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
    let partial = job_path.with_extension(format!("bin.{}.{n}.partial", std::process::id()));
    std::fs::write(&partial, &packed.bytes).map_err(|err| OnchipError::Io {
        path: partial.clone(),
        action: "cannot write the job file",
        err,
    })?;
    std::fs::rename(&partial, &job_path).map_err(|err| OnchipError::Io {
        path: job_path.clone(),
        action: "cannot move the job file into place",
        err,
    })?;
    let elf = super::build(board, boards_dir, &job_path)?;
    let footprint = super::footprint(&elf)?;
    board.check_fits(&footprint)?;
    let stdout = match super::run(board, &elf, timeout) {
        Ok(out) => out,
        Err(OnchipError::RunFailed { stdout, .. })
            if Report::parse(&stdout).is_ok_and(|r| r.first("error").is_some()) =>
        {
            // The firmware's own reason is clearer than its exit status.
            let report = Report::parse(&stdout)?;
            return Err(BoardRun::from_report(&report).err().unwrap_or(
                OnchipError::ReportMissing {
                    what: "an error record without a reason".into(),
                },
            ));
        }
        Err(e) => return Err(e),
    };
    let report = Report::parse(&stdout)?;
    let run = BoardRun::from_report(&report)?;
    if run.stack_peak_bytes >= run.stack_detectable_bytes {
        // Painting found no untouched word: the stack may have run into the statics.
        return Err(OnchipError::DoesNotFit {
            board: board.name.to_string(),
            memory: "stack (the peak reached the end of the free RAM)",
            need: run.stack_peak_bytes,
            have: run.stack_detectable_bytes,
        });
    }
    if run.static_ram_bytes + run.stack_peak_bytes > board.ram_bytes {
        return Err(OnchipError::DoesNotFit {
            board: board.name.to_string(),
            memory: "RAM (statics and stack peak)",
            need: run.static_ram_bytes + run.stack_peak_bytes,
            have: board.ram_bytes,
        });
    }
    let difference = compare::compare(&host.fixed, &run);
    let macs = macs::per_step(&packed.plan, &design.hyper).map_err(|e| OnchipError::Host {
        message: e.to_string(),
    })?;
    Ok(Outcome {
        board: board.clone(),
        host,
        packed,
        budget,
        elf,
        footprint,
        run,
        difference,
        macs,
        stdout,
    })
}

impl Outcome {
    /// Whether the board matched the host in every figure.
    pub fn bit_identical(&self) -> bool {
        self.difference.is_none()
    }

    /// Training instructions per sample (warm-up epochs excluded).
    pub fn instructions_per_sample(&self) -> f64 {
        self.run.train_instructions as f64 / self.run.trained_samples.max(1) as f64
    }

    /// Training instructions per MAC of a full training step.
    pub fn instructions_per_mac(&self) -> f64 {
        self.instructions_per_sample() / self.macs.total().max(1) as f64
    }

    /// The board's `curves.csv`.
    pub fn curves_csv(&self) -> String {
        compare::curves_csv(self.board.name, self.board.clock_hz, &self.run)
    }

    /// `onchip.json`: footprint, memory, instruction counts and the comparison.
    pub fn summary_json(&self, spec: &Spec, design: &Design) -> Value {
        let memory = Memory::of(&self.packed.plan, &design.fixed);
        let fp = &self.footprint;
        let learner_ram = self.run.static_ram_bytes + self.run.stack_peak_bytes;
        let eval: u64 = self.run.epochs.iter().map(|e| e.eval_instructions).sum();
        let tested: u64 = self.run.epochs.iter().map(|e| e.tested).sum();
        let warm: Vec<_> = self.run.epochs.iter().filter(|e| e.warmup).collect();
        let warm_instr: u64 = warm.iter().map(|e| e.train_instructions).sum();
        let warm_samples: u64 = warm.iter().map(|e| e.samples).sum();
        json!({
            "board": {
                "name": self.board.name,
                "core": self.board.core,
                "clock_hz": self.board.clock_hz,
                "ram_bytes": self.board.ram_bytes,
                "flash_bytes": self.board.flash_bytes,
            },
            "spec": spec.to_json(),
            "spec_hash": spec.hash(),
            "bit_identical": self.bit_identical(),
            "first_difference": self.difference.as_ref().map(|d| d.to_string()),
            "digest": { "host": self.host.fixed.digest, "board": self.run.digest },
            "network": {
                "sizes": self.packed.plan.shape.sizes(),
                "rule": design.rule.name(),
                "container_bits": self.packed.container_bits,
                "train_samples": self.packed.header.train_samples,
                "test_samples": self.packed.header.test_samples,
                "epochs": self.packed.header.epochs,
                "warmup_epochs": self.packed.header.warmup_epochs,
                "feedback_steps": design.hyper.feedback_steps,
            },
            "footprint": {
                "flash_bytes": fp.flash_bytes,
                "code_bytes": fp.code_bytes,
                "rodata_bytes": fp.rodata_bytes,
                "data_bytes": fp.data_bytes,
                "zeroed_bytes": fp.zeroed_bytes,
                "static_ram_bytes": fp.ram_bytes,
                "job_bytes": self.packed.bytes.len(),
                "job_data_bytes": self.packed.data_bytes,
                "flash_without_job_bytes": fp.flash_bytes.saturating_sub(self.packed.bytes.len() as u64),
                "sections": fp.sections.iter().map(|s| json!({
                    "name": s.name, "address": s.address, "size": s.size,
                    "class": format!("{:?}", s.class).to_lowercase(),
                })).collect::<Vec<_>>(),
            },
            "ram": {
                "tensor_bytes": memory.total,
                "arena_bytes": self.run.learn.arena_bytes,
                "order_bytes": self.run.learn.order_bytes,
                "other_static_bytes": self.run.static_ram_bytes
                    .saturating_sub(self.run.learn.arena_bytes + self.run.learn.order_bytes),
                "stack_peak_bytes": self.run.stack_peak_bytes,
                "learner_bytes": learner_ram,
                "learner_without_order_bytes": learner_ram.saturating_sub(self.run.learn.order_bytes),
                "budget": self.budget,
            },
            "instructions": {
                "macs_per_step": self.macs,
                "macs_per_step_total": self.macs.total(),
                "macs_per_eval_sample": self.macs.eval(),
                "trained_samples": self.run.trained_samples,
                "train_instructions": self.run.train_instructions,
                "per_sample": self.instructions_per_sample(),
                "per_mac": self.instructions_per_mac(),
                "warmup_per_sample": warm_instr as f64 / warm_samples.max(1) as f64,
                "warmup_per_mac": warm_instr as f64 / warm_samples.max(1) as f64
                    / self.macs.warmup().max(1) as f64,
                "eval_per_sample": eval as f64 / tested.max(1) as f64,
                "eval_per_mac": eval as f64 / tested.max(1) as f64
                    / self.macs.eval().max(1) as f64,
                "emulated_seconds_note": "seconds in curves.csv are instructions / clock_hz: the time on a core retiring one instruction per cycle",
            },
            "epochs": self.run.epochs,
            "host_fixed": {
                "digest": self.host.fixed.digest,
                "test_accuracy": self.host.fixed.test_accuracy,
                "data_saturations": self.host.fixed.data_saturations,
            },
        })
    }
}
