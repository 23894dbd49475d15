//! What a board reports about a training job, and its comparison with the host's fixed arm.
//!
//! The firmware prints (see `boards/README.md`) one `learn` record, one `epoch` record per
//! epoch and a `result` record; [`BoardRun::from_report`] reads them, and [`compare`] finds
//! the first figure that differs from the host's [`ArmResult`].

use serde::Serialize;

use crate::arms::ArmResult;

use super::{OnchipError, Record, Report};

/// One epoch as the board measured it.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct BoardEpoch {
    /// 1-based epoch.
    pub epoch: u16,
    /// Feedback-only (warm-up) epoch.
    pub warmup: bool,
    /// Training samples seen.
    pub samples: u64,
    /// Mean training loss, exactly as the board computed it.
    pub train_loss: f64,
    /// Test samples classified right.
    pub correct: u64,
    /// Test samples.
    pub tested: u64,
    /// Saturation events.
    pub saturations: u64,
    /// Updates lost to rounding.
    pub lost_updates: u64,
    /// Updates attempted.
    pub updates: u64,
    /// Instructions of the training loop (shuffle and all samples).
    pub train_instructions: u64,
    /// Instructions of the evaluation.
    pub eval_instructions: u64,
}

impl BoardEpoch {
    /// Test accuracy, computed as the host computes it.
    pub fn test_accuracy(&self) -> f64 {
        self.correct as f64 / self.tested.max(1) as f64
    }
}

/// The `learn` record: what the firmware was asked to train and the buffers it used.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct BoardLearn {
    /// Rule name.
    pub rule: String,
    /// Layer sizes, `64x16x10`.
    pub sizes: String,
    /// Container bits of the words.
    pub container_bits: u64,
    /// Arena words the network needs.
    pub need_words: u64,
    /// Arena words the firmware holds.
    pub arena_words: u64,
    /// Arena bytes.
    pub arena_bytes: u64,
    /// Order buffer entries.
    pub order_len: u64,
    /// Order buffer bytes.
    pub order_bytes: u64,
}

/// A training run on a board, from its report.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct BoardRun {
    /// The `learn` record.
    pub learn: BoardLearn,
    /// Per-epoch figures.
    pub epochs: Vec<BoardEpoch>,
    /// FNV-1a 64 of the final parameters, 16 hex digits (as `ArmResult::digest`).
    pub digest: String,
    /// Samples trained in full (warm-up epochs excluded).
    pub trained_samples: u64,
    /// Instructions of those samples' training loops.
    pub train_instructions: u64,
    /// Deepest stack use, bytes.
    pub stack_peak_bytes: u64,
    /// Deepest stack use painting can see, bytes (a peak this deep may have gone further).
    pub stack_detectable_bytes: u64,
    /// Static RAM the firmware's own bounds give (`.data` + `.bss` + `.uninit`).
    pub static_ram_bytes: u64,
}

fn flag(r: &Record, key: &str) -> Result<bool, OnchipError> {
    Ok(r.u64(key)? != 0)
}

impl BoardRun {
    /// Reads the training records of a complete report.
    pub fn from_report(report: &Report) -> Result<BoardRun, OnchipError> {
        if let Some(e) = report.first("error") {
            return Err(OnchipError::Rejected {
                message: e.get("msg").unwrap_or("").to_string(),
            });
        }
        if !report.is_complete() {
            return Err(OnchipError::ReportMissing {
                what: "the report does not end with \"tw:end status=ok\"".into(),
            });
        }
        let l = report.require("learn")?;
        let learn = BoardLearn {
            rule: l.require("rule")?.to_string(),
            sizes: l.require("sizes")?.to_string(),
            container_bits: l.u64("container_bits")?,
            need_words: l.u64("need_words")?,
            arena_words: l.u64("arena_words")?,
            arena_bytes: l.u64("arena_bytes")?,
            order_len: l.u64("order_len")?,
            order_bytes: l.u64("order_bytes")?,
        };
        let mut epochs = Vec::new();
        for r in report.records.iter().filter(|r| r.kind == "epoch") {
            let epoch = u16::try_from(r.u64("n")?).map_err(|_| OnchipError::ReportValue {
                line: r.line,
                record: r.kind.clone(),
                key: "n".into(),
                value: r.get("n").unwrap_or("").into(),
                expected: "an epoch number up to 65535",
            })?;
            epochs.push(BoardEpoch {
                epoch,
                warmup: flag(r, "warmup")?,
                samples: r.u64("samples")?,
                train_loss: f64::from_bits(r.u64("loss_bits")?),
                correct: r.u64("correct")?,
                tested: r.u64("tested")?,
                saturations: r.u64("saturations")?,
                lost_updates: r.u64("lost")?,
                updates: r.u64("updates")?,
                train_instructions: r.u64("train_instr")?,
                eval_instructions: r.u64("eval_instr")?,
            });
        }
        let res = report.require("result")?;
        let layout = report.require("layout")?;
        let stack = report.require("stack")?;
        Ok(BoardRun {
            learn,
            epochs,
            digest: format!("{:016x}", res.u64("digest")?),
            trained_samples: res.u64("trained_samples")?,
            train_instructions: res.u64("train_instr")?,
            stack_peak_bytes: stack.u64("peak_bytes")?,
            stack_detectable_bytes: stack.u64("detectable_bytes")?,
            static_ram_bytes: layout.u64("data_bytes")?
                + layout.u64("bss_bytes")?
                + layout.u64("uninit_bytes")?,
        })
    }
}

/// The first figure in which a board run differs from the host's fixed arm.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub enum Difference {
    /// Another number of epochs.
    Epochs {
        /// Host epochs.
        host: usize,
        /// Board epochs.
        board: usize,
    },
    /// A per-epoch figure.
    Figure {
        /// 1-based epoch.
        epoch: u16,
        /// Figure name (a `curves.csv` column, or `updates`, `warmup`).
        figure: &'static str,
        /// Host value.
        host: String,
        /// Board value.
        board: String,
    },
    /// The final parameters.
    Digest {
        /// Host digest.
        host: String,
        /// Board digest.
        board: String,
    },
}

impl std::fmt::Display for Difference {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Difference::Epochs { host, board } => {
                write!(f, "the host trained {host} epochs, the board {board}")
            }
            Difference::Figure {
                epoch,
                figure,
                host,
                board,
            } => write!(
                f,
                "epoch {epoch}: {figure} is {host} on the host, {board} on the board"
            ),
            Difference::Digest { host, board } => write!(
                f,
                "final parameters differ: digest {host} on the host, {board} on the board"
            ),
        }
    }
}

/// The first difference between the host's fixed arm and the board, or `None` when every
/// per-epoch figure (loss and accuracy to the bit, counters exactly) and the final digest
/// agree.
pub fn compare(host: &ArmResult, board: &BoardRun) -> Option<Difference> {
    if host.epochs.len() != board.epochs.len() {
        return Some(Difference::Epochs {
            host: host.epochs.len(),
            board: board.epochs.len(),
        });
    }
    for (h, b) in host.epochs.iter().zip(&board.epochs) {
        let figures: [(&'static str, String, String); 7] = [
            ("epoch", h.epoch.to_string(), b.epoch.to_string()),
            ("warmup", h.warmup.to_string(), b.warmup.to_string()),
            (
                "train_loss",
                format!("{} (bits {:016x})", h.train_loss, h.train_loss.to_bits()),
                format!("{} (bits {:016x})", b.train_loss, b.train_loss.to_bits()),
            ),
            (
                "test_accuracy",
                format!(
                    "{} (bits {:016x})",
                    h.test_accuracy,
                    h.test_accuracy.to_bits()
                ),
                format!(
                    "{} (bits {:016x})",
                    b.test_accuracy(),
                    b.test_accuracy().to_bits()
                ),
            ),
            (
                "saturations",
                h.saturations.to_string(),
                b.saturations.to_string(),
            ),
            (
                "lost_updates",
                h.lost_updates.to_string(),
                b.lost_updates.to_string(),
            ),
            ("updates", h.updates.to_string(), b.updates.to_string()),
        ];
        for (figure, hv, bv) in figures {
            if hv != bv {
                return Some(Difference::Figure {
                    epoch: h.epoch,
                    figure,
                    host: hv,
                    board: bv,
                });
            }
        }
    }
    if host.digest != board.digest {
        return Some(Difference::Digest {
            host: host.digest.clone(),
            board: board.digest.clone(),
        });
    }
    None
}

/// `curves.csv` of a board run, with the columns of `tidewise train`'s: `arm` is the board
/// name and `seconds` the epoch's training and evaluation instructions divided by the core
/// clock, the time on a core that retires one instruction per cycle.
pub fn curves_csv(board_name: &str, clock_hz: u32, run: &BoardRun) -> String {
    let mut s =
        String::from("epoch,arm,train_loss,test_accuracy,saturations,lost_updates,seconds\n");
    for e in &run.epochs {
        let seconds =
            (e.train_instructions + e.eval_instructions) as f64 / f64::from(clock_hz.max(1));
        s.push_str(&format!(
            "{},{board_name},{},{},{},{},{seconds:.6}\n",
            e.epoch,
            e.train_loss,
            e.test_accuracy(),
            e.saturations,
            e.lost_updates
        ));
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::arms::EpochRow;

    const REPORT: &str = "tw:board name=microbit clock_hz=16000000 systick_period=65536 version=2\n\
        tw:learn rule=bp sizes=16x4x4 container_bits=16 train=3 test=2 epochs=2 warmup=0 feedback_steps=0 need_words=200 arena_words=200 arena_bytes=400 order_len=3 order_bytes=12\n\
        tw:epoch n=1 warmup=0 samples=3 loss_bits=0x3fe0000000000000 correct=1 tested=2 saturations=4 lost=5 updates=60 train_ticks=10 train_instr=625 eval_ticks=2 eval_instr=125\n\
        tw:epoch n=2 warmup=0 samples=3 loss_bits=0x3fd0000000000000 correct=2 tested=2 saturations=0 lost=1 updates=60 train_ticks=10 train_instr=625 eval_ticks=2 eval_instr=125\n\
        tw:result digest=0x00000000deadbeef trained_samples=6 train_ticks=20 train_instr=1250 instr_per_sample=208\n\
        tw:layout text_bytes=1 rodata_bytes=2 data_bytes=4 bss_bytes=412 uninit_bytes=0\n\
        tw:stack peak_bytes=900 limit_bytes=15000 detectable_bytes=15000\n\
        tw:end status=ok\n";

    fn host() -> ArmResult {
        let row = |epoch, train_loss, test_accuracy, saturations, lost_updates| EpochRow {
            epoch,
            train_loss,
            test_accuracy,
            saturations,
            lost_updates,
            updates: 60,
            seconds: 0.0,
            warmup: false,
        };
        ArmResult {
            epochs: vec![row(1, 0.5, 0.5, 4, 5), row(2, 0.25, 1.0, 0, 1)],
            test_accuracy: 1.0,
            initial_test_accuracy: 0.0,
            train_loss: 0.25,
            test_loss: 0.25,
            samples_per_second: 0.0,
            lost_updates: 6,
            saturations: 4,
            updates: 120,
            data_saturations: 0,
            digest: "00000000deadbeef".into(),
            lost_by_layer: vec![],
            saturations_by_class: vec![],
            init: vec![],
        }
    }

    #[test]
    fn parse_and_compare() {
        let run = BoardRun::from_report(&Report::parse(REPORT).unwrap()).unwrap();
        assert_eq!(run.epochs.len(), 2);
        assert_eq!(run.epochs[0].train_loss, 0.5);
        assert_eq!(run.static_ram_bytes, 416);
        assert_eq!(run.learn.sizes, "16x4x4");
        assert_eq!(compare(&host(), &run), None);
        let mut h = host();
        h.epochs[1].train_loss = 0.25 + f64::EPSILON / 4.0;
        match compare(&h, &run) {
            Some(Difference::Figure {
                epoch: 2, figure, ..
            }) => assert_eq!(figure, "train_loss"),
            other => panic!("{other:?}"),
        }
        let mut h = host();
        h.digest = "00000000deadbeee".into();
        assert!(matches!(compare(&h, &run), Some(Difference::Digest { .. })));
        let mut h = host();
        h.epochs.pop();
        assert!(matches!(
            compare(&h, &run),
            Some(Difference::Epochs { host: 1, board: 2 })
        ));
        // 625 + 125 instructions at 16 MHz.
        let csv = curves_csv("microbit", 16_000_000, &run);
        assert_eq!(csv.lines().nth(1), Some("1,microbit,0.5,0.5,4,5,0.000047"));
    }

    #[test]
    fn rejected_jobs_carry_the_firmware_message() {
        let out = "tw:job bytes=3 fnv1a32=0x1\ntw:error msg=job checksum mismatch: stored 0x1\n";
        match BoardRun::from_report(&Report::parse(out).unwrap()) {
            Err(OnchipError::Rejected { message }) => {
                assert_eq!(message, "job checksum mismatch: stored 0x1")
            }
            other => panic!("{other:?}"),
        }
    }
}
