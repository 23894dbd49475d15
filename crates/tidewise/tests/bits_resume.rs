//! `tidewise bits` killed with SIGKILL at seeded moments and rerun each time ends with the
//! same bytes as an uninterrupted run: `recommendation.json`, `recommended.toml` and
//! `runs.csv`, and a journal in which no run was made twice.

use std::collections::BTreeSet;
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::Duration;

const SPEC: &str = "[data]\nsource = \"pump\"\nsamples = 300\n[net]\nhidden = [8]\n\
    [rule]\nwarmup_epochs = 1\n[run]\nepochs = 6\n";
const ARGS: [&str; 12] = [
    "--search-seeds",
    "3",
    "--confirm-seeds",
    "6",
    "--rounds",
    "2",
    "--tolerance",
    "3",
    "--jobs",
    "2",
    "--scan-step",
    "3",
];

fn command(spec: &Path, out: &Path) -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_tidewise"));
    c.arg("bits")
        .arg(spec)
        .arg("--out")
        .arg(out)
        .arg("--quiet")
        .args(ARGS)
        .stdout(Stdio::null())
        .stderr(Stdio::piped());
    c
}

/// Seeded delays (SplitMix64), in milliseconds within `[lo, hi)` (`lo < hi`).
fn delays(seed: u64, n: usize, lo: u64, hi: u64) -> Vec<u64> {
    let mut z = seed;
    (0..n)
        .map(|_| {
            z = z.wrapping_add(0x9e37_79b9_7f4a_7c15);
            let mut x = z;
            x = (x ^ (x >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
            x = (x ^ (x >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
            lo + (x ^ (x >> 31)) % (hi - lo)
        })
        .collect()
}

fn journal_keys(dir: &Path) -> (usize, usize) {
    let text = std::fs::read_to_string(dir.join("journal.jsonl")).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    let keys: BTreeSet<String> = lines
        .iter()
        .map(|l| {
            let mut v: serde_json::Value = serde_json::from_str(l).unwrap();
            let o = v.as_object_mut().unwrap();
            let keep: serde_json::Map<_, _> = ["arm", "seed", "split", "point"]
                .iter()
                .filter_map(|k| o.get(*k).map(|x| (k.to_string(), x.clone())))
                .collect();
            serde_json::Value::Object(keep).to_string()
        })
        .collect();
    (lines.len(), keys.len())
}

#[test]
fn killed_and_resumed_runs_end_byte_identical() {
    let dir = tempfile::tempdir().unwrap();
    let spec = dir.path().join("pump.toml");
    std::fs::write(&spec, SPEC).unwrap();
    let whole = dir.path().join("whole");
    let t = std::time::Instant::now();
    let o = command(&spec, &whole).output().unwrap();
    // Kill moments scale with this machine's speed: 5% to 35% of an uninterrupted run.
    let full = t.elapsed().as_millis() as u64;
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));

    let cut = dir.path().join("cut");
    let mut kills = 0;
    for ms in delays(11, 5, (full / 20).max(20), (full * 7 / 20).max(40)) {
        let mut child = command(&spec, &cut).spawn().unwrap();
        std::thread::sleep(Duration::from_millis(ms));
        if child.try_wait().unwrap().is_none() {
            child.kill().unwrap(); // SIGKILL
            kills += 1;
        }
        child.wait().unwrap();
    }
    let o = command(&spec, &cut).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(kills >= 2, "only {kills} kills landed before the run ended");
    for f in ["recommendation.json", "recommended.toml", "runs.csv"] {
        let a = std::fs::read(whole.join(f)).unwrap();
        let b = std::fs::read(cut.join(f)).unwrap();
        assert!(a == b, "{f} differs after {kills} kills");
    }
    let (lines, keys) = journal_keys(&cut);
    assert_eq!(lines, keys, "a run was journalled twice");
    assert_eq!(journal_keys(&whole), (lines, keys));
}
