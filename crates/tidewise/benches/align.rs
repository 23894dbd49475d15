//! Cost of measuring alignment against a plain run (`cargo bench -p tidewise --bench align`).
//!
//! The digits network of the default spec (64-64-10, `dtp-direct`, both arms), a few epochs,
//! measured every epoch on 20 test samples, against the same run without measuring, in this
//! process. Prints the time ratio (target: at most 3) and the share of the measured run spent
//! measuring. Each figure is the fastest of `ALIGN_BENCH_REPEATS` runs (default 3).
//! Setting `ALIGN_BENCH_RULE` measures another rule.

use std::time::Instant;

use tidewise::align::{self, Options};
use tidewise::arms::{self, NoObserver};
use tidewise::spec;

const EPOCHS: u16 = 6;

fn main() {
    let rule = std::env::var("ALIGN_BENCH_RULE").unwrap_or_else(|_| "dtp-direct".into());
    let repeats: usize = std::env::var("ALIGN_BENCH_REPEATS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(3)
        .max(1);
    let text = format!(
        "[data]\nsource = \"digits\"\n[net]\nhidden = [64]\n[rule]\nname = \"{rule}\"\n[run]\nepochs = {EPOCHS}\n"
    );
    let (spec, design) = match spec::parse(&text, &[]) {
        Ok(v) => v,
        Err(e) => {
            eprintln!("bench spec: {e}");
            std::process::exit(2);
        }
    };
    let prepared = match arms::prepare(&spec) {
        Ok(p) => p,
        Err(e) => {
            eprintln!("digits data: {e}");
            std::process::exit(2);
        }
    };
    let options = Options {
        every: 1,
        samples: 20,
        measures: Vec::new(),
    };
    let (mut plain, mut probed, mut inside) = (f64::MAX, f64::MAX, 0f64);
    for _ in 0..repeats {
        let t = Instant::now();
        let a = arms::run(
            &spec,
            &design,
            &prepared,
            &mut NoObserver,
            &mut |_, _, _| {},
        );
        let dt = t.elapsed().as_secs_f64();
        if let Err(e) = a {
            eprintln!("plain run: {e}");
            std::process::exit(2);
        }
        plain = plain.min(dt);

        let t = Instant::now();
        let b = align::run(&spec, &design, &prepared, &options, &mut |_, _, _| {});
        let dt = t.elapsed().as_secs_f64();
        match b {
            Ok(p) if dt < probed => {
                probed = dt;
                inside = p.align_seconds;
            }
            Ok(_) => {}
            Err(e) => {
                eprintln!("measured run: {e}");
                std::process::exit(2);
            }
        }
    }
    let checkpoints = 2 * (usize::from(EPOCHS) + 1);
    println!(
        "align bench: digits 64-64-10, {rule}, {EPOCHS} epochs, both arms, 20 measured samples at {checkpoints} checkpoints"
    );
    println!("plain run    {plain:8.3} s");
    println!(
        "measured run {probed:8.3} s (measuring itself {inside:.3} s, {:.1} ms per checkpoint)",
        1e3 * inside / checkpoints as f64
    );
    println!(
        "ratio        {:8.2}x   (target: at most 3x)",
        probed / plain
    );
}
