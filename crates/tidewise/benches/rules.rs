//! Training samples per second of every rule, 16-bit fixed point against float, in the same
//! run, and the multiply-accumulates per second that implies against the raw 16-bit
//! dot-product loop of the formats benchmark (also measured here).
//!
//! Run: `cargo bench -p tidewise --bench rules`. The digits spec, 8 epochs per arm.

use std::hint::black_box;
use std::path::Path;
use std::time::Instant;

use tidewise::arms::{self, NoObserver};
use tidewise::onchip::macs;
use tidewise::spec;
use tidewise_core::backend::{Backend, ClassSpec, Fixed, FixedConfig};
use tidewise_core::class::{Class, Tag, CLASSES};
use tidewise_core::format::{Format, Overflow};
use tidewise_core::round::Rounding;

/// Raw 16-bit dot product rate (MAC/s) through `Backend::dot`, 1024 terms, best of 20.
fn raw_dot_rate() -> f64 {
    let spec = ClassSpec {
        format: Format::new(16, 12).expect("format"),
        rounding: Rounding::Stochastic,
    };
    let cfg = FixedConfig {
        layers: Default::default(),
        classes: [spec; CLASSES],
        acc_bits: 32,
        acc_overflow: Overflow::Saturate,
    };
    let mut be = Fixed::<i16>::new(cfg, 1).expect("backend");
    let a: Vec<i16> = (0..1024).map(|i| ((i * 37) % 601 - 300) as i16).collect();
    let b: Vec<i16> = (0..1024).map(|i| ((i * 53) % 401 - 200) as i16).collect();
    let mut best = f64::MAX;
    for _ in 0..20 {
        let t = Instant::now();
        for _ in 0..2000 {
            black_box(be.dot(
                Tag::global(Class::Act),
                Tag::global(Class::Forward),
                black_box(&a),
                1,
                Tag::global(Class::Act),
                black_box(&b),
                None,
            ));
        }
        best = best.min(t.elapsed().as_secs_f64());
    }
    2000.0 * 1024.0 / best
}

fn main() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data/digits.toml");
    let raw = raw_dot_rate();
    println!(
        "raw 16-bit dot product through Backend::dot: {:.0} MMAC/s",
        raw / 1e6
    );
    println!("rule        fixed samples/s  float samples/s  fixed/float  MACs/sample  fixed MMAC/s  of raw dot");
    for rule in ["bp", "fa", "dfa", "tp", "dtp", "dtp-drl", "dtp-direct"] {
        let sets = [
            format!("rule.name={rule}"),
            "run.epochs=8".into(),
            "rule.warmup_epochs=0".into(),
        ];
        let (spec, design) = spec::load(&path, &sets).expect("spec");
        let prepared = arms::prepare(&spec).expect("data");
        let plan = arms::plan(&spec, &design, &prepared).expect("plan");
        let cmp = arms::run(
            &spec,
            &design,
            &prepared,
            &mut NoObserver,
            &mut |_, _, _| {},
        )
        .expect("run");
        let m = macs::per_step(
            &plan,
            design.rule,
            design.hyper.feedback_steps,
            design.hyper.regulariser,
        )
        .total() as f64;
        let (fx, fl) = (cmp.fixed.samples_per_second, cmp.float.samples_per_second);
        println!(
            "{rule:<11} {fx:>15.0}  {fl:>15.0}  {:>11.2}  {m:>11.0}  {:>12.1}  {:>9.2}",
            fx / fl,
            fx * m / 1e6,
            fx * m / raw
        );
    }
}
