//! Sweep throughput and memory, through the library (`cargo bench -p tidewise --bench sweep`).
//!
//! 1. Speed-up: one sweep of identical small runs (digits, only the seed varies) with one
//!    thread, then with two, in this process.
//! 2. Peak memory: sweeps of 100 and 400 runs, each in a fresh child process of this binary
//!    that reports its peak resident set (`VmHWM` of /proc/self/status); results stream to
//!    disk, so the figure should not grow with the number of runs.
//! 3. A bit-width sweep of 200 digits runs: 5 forward-weight formats x 2 roundings x 2 rules
//!    x 10 seeds, a 64-32-10 network, 5 epochs (1 of feedback warm-up), all cores.
//!
//! Set `SWEEP_BENCH_QUICK=1` for a short pass (fewer runs) while editing.

use std::path::Path;
use std::process::Command;
use std::time::Instant;

use tidewise::sweep::{self, Grid, Options, Sweep};

const DIGITS: &str = "# Invented scenario: sizing the weight memory of a digit-reading learner.\n[data]\nsource = \"digits\"\n[net]\nhidden = [32]\n[rule]\nwarmup_epochs = 1\n[run]\nepochs = 5\n";
const PUMP: &str = "# Invented demo: a pump-monitor learner.\n[data]\nsource = \"pump\"\nsamples = 120\n[net]\nhidden = [8]\n[rule]\nwarmup_epochs = 0\n[run]\nepochs = 1\n";

fn quick() -> bool {
    std::env::var("SWEEP_BENCH_QUICK").is_ok_and(|v| v == "1")
}

fn seeds(n: usize) -> String {
    let list: Vec<String> = (1..=n).map(|s| s.to_string()).collect();
    format!("\"run.seed\" = [{}]\n", list.join(", "))
}

fn timed(spec: &str, grid: &str, jobs: usize) -> (f64, usize) {
    let (t, n, _) = timed_cpu(spec, grid, jobs);
    (t, n)
}

/// Wall seconds, runs made, CPU seconds.
fn timed_cpu(spec: &str, grid: &str, jobs: usize) -> (f64, usize, f64) {
    let tmp = tempfile::tempdir().expect("temp dir");
    let g = Grid::parse(grid, "bench grid").expect("grid");
    let sw = Sweep::from_text(spec, "bench spec", Path::new("/"), &[], g).expect("spec");
    let c = cpu_seconds();
    let t = Instant::now();
    let o = sweep::run_sweep(
        &sw,
        &tmp.path().join("out"),
        &Options {
            jobs: Some(jobs),
            shard: None,
        },
        &|_| {},
    )
    .expect("sweep");
    (t.elapsed().as_secs_f64(), o.ran, cpu_seconds() - c)
}

/// CPU seconds (user + system) this process used so far, from /proc/self/stat (fields 14 and
/// 15, in clock ticks; 100 ticks per second on Linux, the USER_HZ of proc(5)).
fn cpu_seconds() -> f64 {
    let Ok(s) = std::fs::read_to_string("/proc/self/stat") else {
        return 0.0;
    };
    // The command name (field 2) is in parentheses and may hold spaces: count after it.
    let rest = s.rsplit_once(')').map_or("", |r| r.1);
    // After it: field 3 (state) at position 0, so utime (14) and stime (15) at 11 and 12.
    let f: Vec<&str> = rest.split_whitespace().collect();
    let tick = |i: usize| f.get(i).and_then(|x| x.parse::<u64>().ok());
    match (tick(11), tick(12)) {
        (Some(u), Some(k)) => (u + k) as f64 / 100.0,
        _ => 0.0,
    }
}

/// Peak resident set of this process in kB.
fn vm_hwm_kb() -> Option<u64> {
    let s = std::fs::read_to_string("/proc/self/status").ok()?;
    s.lines()
        .find(|l| l.starts_with("VmHWM:"))?
        .split_whitespace()
        .nth(1)?
        .parse()
        .ok()
}

fn child_memory(n: usize) {
    let (secs, ran) = timed(PUMP, &seeds(n), 2);
    println!(
        "child runs={ran} seconds={secs:.2} vm_hwm_kb={}",
        vm_hwm_kb().unwrap_or(0)
    );
}

fn memory_of(n: usize) -> Option<u64> {
    let exe = std::env::current_exe().ok()?;
    let o = Command::new(exe)
        .args(["--child-memory", &n.to_string()])
        .output()
        .ok()?;
    let text = String::from_utf8_lossy(&o.stdout);
    text.split_whitespace()
        .find_map(|w| w.strip_prefix("vm_hwm_kb="))?
        .parse()
        .ok()
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    if let Some(i) = args.iter().position(|a| a == "--child-memory") {
        let n = args.get(i + 1).and_then(|s| s.parse().ok()).unwrap_or(100);
        child_memory(n);
        return;
    }
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    println!("sweep bench: {cores} cores");

    // 1. One thread against two.
    let n = if quick() { 8 } else { 24 };
    let grid = seeds(n);
    let load = std::fs::read_to_string("/proc/loadavg").unwrap_or_default();
    println!(
        "load average before: {}",
        load.split_whitespace()
            .take(3)
            .collect::<Vec<_>>()
            .join(" ")
    );
    let (t1, r1, c1) = timed_cpu(DIGITS, &grid, 1);
    let (t2, r2, c2) = timed_cpu(DIGITS, &grid, 2);
    println!(
        "speed-up: {n} digits runs (64-32-10, 5 epochs): --jobs 1 {t1:.2} s ({:.3} s/run), --jobs 2 {t2:.2} s; ratio {:.2}",
        t1 / r1.max(1) as f64,
        t1 / t2
    );
    // On a machine shared with other work the wall-clock ratio is capped by the cores left
    // over; CPU time per run and cores kept busy tell the runner's own overhead apart.
    println!(
        "  cpu per run: --jobs 1 {:.3} s, --jobs 2 {:.3} s; cores kept busy: {:.2} and {:.2}",
        c1 / r1.max(1) as f64,
        c2 / r2.max(1) as f64,
        c1 / t1,
        c2 / t2
    );
    assert_eq!((r1, r2), (n, n));

    // 2. Peak memory against the number of runs.
    let (small, large) = if quick() { (20, 80) } else { (100, 400) };
    match (memory_of(small), memory_of(large)) {
        (Some(a), Some(b)) => println!(
            "peak memory (VmHWM, pump 8-hidden runs, --jobs 2): {small} runs {a} kB, {large} runs {b} kB; ratio {:.2}",
            b as f64 / a.max(1) as f64
        ),
        _ => println!("peak memory: could not read VmHWM of the child processes"),
    }

    // 3. A bit-width sweep.
    let grid = format!(
        "\"fixed.forward_weights\" = [\"Q1.6\", \"Q1.8\", \"Q2.9\", \"Q2.11\", \"Q2.13\"]\n\"fixed.rounding\" = [\"nearest\", \"stochastic\"]\n\"rule.name\" = [\"dtp-direct\", \"dfa\"]\n{}",
        seeds(if quick() { 2 } else { 10 })
    );
    let (t, ran) = timed(DIGITS, &grid, cores);
    println!(
        "bit-width sweep: {ran} digits runs (5 weight formats x 2 roundings x 2 rules x seeds, 64-32-10, 5 epochs) on {cores} threads: {t:.1} s ({:.2} s/run)",
        t / ran.max(1) as f64
    );
    // The same points, each run with both arms as `tidewise train` does (no float arm shared
    // between points), against the sweep on one thread, in alternation, best of 2.
    let g = Grid::parse(&grid, "bench grid").expect("grid");
    let sw = Sweep::from_text(DIGITS, "bench spec", Path::new("/"), &[], g).expect("spec");
    let specs: Vec<_> = (0..sw.len())
        .map(|i| sw.spec_at(i).expect("point"))
        .collect();
    let (mut alone, mut shared) = (f64::INFINITY, f64::INFINITY);
    for _ in 0..2 {
        let t = Instant::now();
        let cache = sweep::DataCache::new();
        for (spec, design) in &specs {
            let data = cache.get(spec).expect("data");
            let quiet = &mut |_, _, _| {};
            tidewise::arms::run(spec, design, &data, &mut tidewise::arms::NoObserver, quiet)
                .expect("run");
        }
        alone = alone.min(t.elapsed().as_secs_f64());
        shared = shared.min(timed(DIGITS, &grid, 1).0);
    }
    println!(
        "the same {} points on 1 thread: every run with its own float arm {alone:.1} s, the sweep (one float arm per seed and rule) {shared:.1} s: {:.2}x",
        specs.len(),
        alone / shared
    );
}
