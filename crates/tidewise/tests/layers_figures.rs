//! Memory, energy and report figures of a design with per-layer formats, against hand
//! arithmetic on the documented counting rules and the published 8- and 32-bit points of
//! "Computing's energy problem (and what we can do about it)", IEEE ISSCC Digest of
//! Technical Papers, 2014 (docs/references.md [21]; 45 nm: integer multiply 0.2 / 3.1 pJ, integer add 0.03 / 0.1 pJ).
//!
//! The network is 16-6-4 on the invented pump data (made up, nothing measured), trained by
//! bp with identity activations, so the forward pass is multiply-accumulates only.

use tidewise::arms;
use tidewise::energy::{self, EnergyTable, Phase};
use tidewise::memory::Memory;
use tidewise::spec;
use tidewise::summary;

const SPEC: &str = "[data]\nsource = \"pump\"\nsamples = 200\n\
                    [net]\nhidden = [6]\nactivation = \"identity\"\n[rule]\nname = \"bp\"\nwarmup_epochs = 0\n\
                    [fixed]\nforward_weights = [\"Q3.28\", \"Q0.7\"]\nbiases = [\"Q3.28\", \"Q1.6\"]\n\
                    activations = [\"Q3.28\", \"Q2.5\", \"Q2.5\"]\naccumulator = 32\n[run]\nepochs = 1\n";

#[test]
fn memory_sums_each_layers_words() {
    let (spec, design) = spec::parse(SPEC, &[]).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let plan = arms::plan(&spec, &design, &prepared).unwrap();
    assert_eq!(plan.shape.sizes(), &[16, 6, 4]);
    let m = Memory::of(&plan, &design.fixed);
    // W_1: 6 × 16 values of 32 bits, W_2: 4 × 6 of 8 bits.
    assert_eq!(m.forward_weights.bits, 96 * 32 + 24 * 8);
    assert_eq!(m.forward_weights.word_bits, 32);
    assert_eq!(m.biases.bits, 6 * 32 + 4 * 8);
    // h_0 (16 × 32 bits), h_1 and h_2 (8 bits), and f', d, δ of layers 1 and 2 (8 bits).
    assert_eq!(m.activations.bits, 16 * 32 + (6 + 4) * 8 + 3 * (6 + 4) * 8);
    // Every stored value sits in the 32-bit container the widest layer needs.
    assert_eq!(m.container_bytes, 4);
    assert_eq!(m.total, 4 * plan.counts().total() as u64);
}

#[test]
fn energy_costs_each_layer_at_its_widths() {
    let (spec, design) = spec::parse(SPEC, &[]).unwrap();
    let prepared = arms::prepare(&spec).unwrap();
    let plan = arms::plan(&spec, &design, &prepared).unwrap();
    let table = EnergyTable::default_45nm();
    let ops = energy::ops_per_sample(&plan, &design).unwrap();
    let e = energy::energy(&ops, &table, &design);
    let forward = e
        .by_phase
        .iter()
        .find(|(p, _)| p == Phase::Forward.name())
        .map(|p| p.1)
        .unwrap();
    // 96 MACs of 32 × 32 bits (3.1 pJ) and 24 of 8 × 8 bits (0.2 pJ), 120 additions in the
    // 32-bit accumulator (0.1 pJ), and every parameter read once at its layer's word.
    let bits_read = 96 * 32 + 6 * 32 + 24 * 8 + 4 * 8;
    let by_hand =
        96.0 * 3.1 + 24.0 * 0.2 + 120.0 * 0.1 + bits_read as f64 * e.sram_pj_per_64bit / 64.0;
    assert!(
        (forward - by_hand).abs() <= 1e-9 * by_hand,
        "{forward} vs {by_hand}"
    );
    // The same design in one class format each (the widest layer's) costs more.
    let uniform = [
        "fixed.forward_weights=Q3.28",
        "fixed.biases=Q3.28",
        "fixed.activations=Q3.28",
    ]
    .map(String::from);
    let (_, wide) = spec::parse(SPEC, &uniform).unwrap();
    let ew = energy::energy(
        &energy::ops_per_sample(&plan, &wide).unwrap(),
        &table,
        &wide,
    );
    assert!(
        ew.total_pj > e.total_pj,
        "{} vs {}",
        ew.total_pj,
        e.total_pj
    );
}

#[test]
fn reports_show_the_layers() {
    let (spec, design) = spec::parse(SPEC, &[]).unwrap();
    let formats = summary::formats_json(&design);
    assert_eq!(formats["forward_weights"]["format"], "Q3.28|Q0.7");
    assert_eq!(formats["forward_weights"]["layers"][1]["word_bits"], 8);
    assert_eq!(formats["activations"]["format"], "Q3.28|Q2.5|Q2.5");
    assert_eq!(formats["feedback_weights"]["format"], "Q2.13");
    let prepared = arms::prepare(&spec).unwrap();
    let cmp = arms::run(
        &spec,
        &design,
        &prepared,
        &mut arms::NoObserver,
        &mut |_, _, _| {},
    )
    .unwrap();
    let table = summary::table(&spec, &design, &cmp);
    assert!(
        table.contains("per-layer formats: forward_weights Q3.28|Q0.7  biases Q3.28|Q1.6  activations Q3.28|Q2.5|Q2.5"),
        "{table}"
    );
    let json = summary::outcome_json(&spec, &design, &cmp);
    assert_eq!(json["design"]["biases"]["format"], "Q3.28|Q1.6");
    assert_eq!(json["spec"]["fixed"]["forward_weights"][1], "Q0.7");
}
