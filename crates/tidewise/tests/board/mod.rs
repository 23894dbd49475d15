//! What the board tests share: skipping without QEMU, and the per-epoch comparison of a board
//! run with the host's fixed arm.

use tidewise::onchip::{self, Outcome};

/// Whether QEMU is there; without it the test is skipped with a message, or fails when
/// `TIDEWISE_REQUIRE_QEMU` is set (as `ci/test.sh` does).
pub fn qemu_or_skip(test: &str) -> bool {
    if onchip::qemu_available() {
        return true;
    }
    let msg = format!(
        "{test}: skipped: `{}` is not installed (run `bash ci/qemu.sh`)",
        onchip::QEMU
    );
    if std::env::var_os("TIDEWISE_REQUIRE_QEMU").is_some_and(|v| !v.is_empty() && v != "0") {
        panic!("{msg}; TIDEWISE_REQUIRE_QEMU is set, so this is a failure");
    }
    eprintln!("{msg}");
    false
}

/// The board's digest and every per-epoch figure (loss and accuracy to the bit, event counts,
/// samples trained) equal the host's fixed arm's; `what` names the case in failures.
#[allow(dead_code)] // not every test file that shares this module compares runs
pub fn assert_epochs_match(
    what: &str,
    o: &Outcome,
    host: &tidewise::arms::ArmResult,
    train_samples: u64,
) {
    assert_eq!(o.difference, None, "{what}: {:?}", o.difference);
    assert!(o.bit_identical(), "{what}");
    assert_eq!(o.run.digest, host.digest, "{what}: digest");
    assert_eq!(o.run.epochs.len(), host.epochs.len(), "{what}");
    for (b, h) in o.run.epochs.iter().zip(&host.epochs) {
        let e = b.epoch;
        assert_eq!(e, h.epoch);
        assert_eq!(b.warmup, h.warmup, "{what} epoch {e}");
        assert_eq!(
            b.train_loss.to_bits(),
            h.train_loss.to_bits(),
            "{what} epoch {e}: loss"
        );
        assert_eq!(
            b.test_accuracy().to_bits(),
            h.test_accuracy.to_bits(),
            "{what} epoch {e}: accuracy"
        );
        assert_eq!(b.saturations, h.saturations, "{what} epoch {e}");
        assert_eq!(b.lost_updates, h.lost_updates, "{what} epoch {e}");
        assert_eq!(b.updates, h.updates, "{what} epoch {e}");
        assert_eq!(b.samples, train_samples, "{what} epoch {e}");
    }
}
