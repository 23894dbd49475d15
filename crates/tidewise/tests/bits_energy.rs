//! The energy model against its published table and against hand arithmetic.
//!
//! Table values: "Computing's energy problem (and what we can do about it)", IEEE ISSCC
//! Digest of Technical Papers, 2014 (docs/references.md [21]; 45 nm, 0.9 V): integer add 0.03 / 0.1 pJ (8 / 32 bit),
//! integer multiply 0.2 / 3.1 pJ, float add 0.9 pJ and multiply 3.7 pJ (32 bit), 64-bit SRAM
//! read 10 / 20 / 100 pJ from 8 KB / 32 KB / 1 MB (checked against a secondary quotation of
//! the table; the paper has no 16-bit integer entries).

use std::path::Path;

use tidewise::energy::{self, EnergyTable};
use tidewise_core::activation::Activation;
use tidewise_core::plan::{Plan, Shape};
use tidewise_core::rules::Rule;

fn close(a: f64, b: f64, tol: f64) -> bool {
    (a - b).abs() <= tol * b.abs().max(1e-12)
}

#[test]
fn scaling_law_reproduces_the_published_points_exactly() {
    // Source: ISSCC 2014 keynote paper, energy table (values above).
    let t = EnergyTable::default_45nm();
    for (w, pj) in [(8, 0.03), (32, 0.1)] {
        let l = t.int_add(w);
        assert_eq!(l.pj, pj, "add {w}");
        assert!(l.published);
    }
    for (w, pj) in [(8, 0.2), (32, 3.1)] {
        let l = t.int_mul(w, w);
        assert_eq!(l.pj, pj, "mul {w}");
        assert!(l.published);
    }
    // Derived from the same table: 32-bit over 8-bit multiply is 15.5, close to 4² = 16 (the
    // quadratic law); add is 3.33, close to 4 (the linear law).
    let mul_ratio = t.int_mul(32, 32).pj / t.int_mul(8, 8).pj;
    let add_ratio = t.int_add(32).pj / t.int_add(8).pj;
    assert!(close(mul_ratio, 15.5, 1e-12) && (mul_ratio - 16.0).abs() < 1.0);
    assert!(close(add_ratio, 0.1 / 0.03, 1e-12) && (add_ratio - 4.0).abs() < 1.0);
}

#[test]
fn sixteen_bits_is_interpolated_as_documented() {
    // 16 bits is the log-midpoint of 8 and 32, so a power law through the two points gives
    // their geometric mean (derived): √(0.2·3.1) = 0.78740 pJ, √(0.03·0.1) = 0.054772 pJ.
    let t = EnergyTable::default_45nm();
    let m = t.int_mul(16, 16);
    let a = t.int_add(16);
    assert!(
        !m.published && !a.published,
        "16-bit is not a published point"
    );
    assert!(close(m.pj, (0.2f64 * 3.1).sqrt(), 1e-12), "{}", m.pj);
    assert!(close(m.pj, 0.787_40, 1e-5));
    assert!(close(a.pj, (0.03f64 * 0.1).sqrt(), 1e-12), "{}", a.pj);
    assert!(close(a.pj, 0.054_772, 1e-5));
    // The exponent between the points, ln(15.5)/ln(4) = 1.977: 12 bits by hand.
    let k = (3.1f64 / 0.2).ln() / 4f64.ln();
    assert!(close(t.int_mul(12, 12).pj, 0.2 * 1.5f64.powf(k), 1e-12));
    // A mixed 8×32 multiply costs as a 16×16 one (∝ a·b under the quadratic law).
    assert!(close(t.int_mul(8, 32).pj, m.pj, 1e-12));
    // Outside the table the ideal laws continue: 4-bit multiply 0.2·(4/8)² = 0.05 pJ,
    // 64-bit add 0.1·2 = 0.2 pJ (derived).
    assert!(close(t.int_mul(4, 4).pj, 0.05, 1e-12));
    assert!(close(t.int_add(64).pj, 0.2, 1e-12));
}

#[test]
fn sram_row_follows_the_storage_size() {
    // Source: ISSCC 2014 keynote paper, 64-bit cache/SRAM reads 10 / 20 / 100 pJ.
    let t = EnergyTable::default_45nm();
    assert_eq!(t.sram_for(8 * 1024), (8, 10.0, false));
    assert_eq!(t.sram_for(8 * 1024 + 1), (32, 20.0, false));
    assert_eq!(t.sram_for(1024 * 1024), (1024, 100.0, false));
    assert_eq!(t.sram_for(2 * 1024 * 1024), (1024, 100.0, true));
}

#[test]
fn shipped_table_file_reproduces_the_default() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data/energy/45nm.toml");
    let t = EnergyTable::load(&path).expect("demo table parses");
    assert_eq!(t, EnergyTable::default_45nm());
    // And the default survives its own TOML form.
    let again = EnergyTable::parse(&t.to_toml(), "round trip").unwrap();
    assert_eq!(again, t);
}

/// 2-3-2, tanh hidden layer, identity output, trained by bp with every stored class, the
/// step register and the rate at 8 bits and a 32-bit accumulator, so every multiply is an
/// 8×8 one and every figure is a published point.
#[test]
fn energy_of_a_tiny_bp_step_by_hand() {
    let spec = "[data]\nsource = \"pump\"\n[rule]\nname = \"bp\"\n[fixed]\n\
        forward_weights = \"Q0.7\"\nbiases = \"Q0.7\"\nfeedback_weights = \"Q0.7\"\n\
        activations = \"Q1.6\"\nnoise = \"Q0.7\"\nrate = \"Q0.7\"\nstep = \"Q0.7\"\naccumulator = 32\n";
    let (_, design) = tidewise::spec::parse(spec, &[]).unwrap();
    let plan = Plan::new(
        Shape::new(&[2, 3, 2]).unwrap(),
        Rule::Bp,
        Activation::Tanh,
        Activation::Identity,
    );
    let ops = energy::ops_per_sample(&plan, &design).unwrap();
    let t = EnergyTable::default_45nm();
    let e = energy::energy(&ops, &t, &design);
    // Hand count (see bits_ops.rs): 18 MACs + 37 other multiplies = 55 multiplies at 0.2 pJ;
    // 18 accumulator adds at 32 bits (0.1 pJ) and 28 8-bit adds (0.03 pJ); 40 parameter reads
    // and 17 writes of 8 bits from the 8 KB SRAM (10 pJ per 64 bits).
    let mult = 55.0 * 0.2;
    let add = 18.0 * 0.1 + 28.0 * 0.03;
    let mem = 57.0 * 8.0 * 10.0 / 64.0;
    assert!(close(e.multiply_pj, mult, 1e-12), "{}", e.multiply_pj);
    assert!(close(e.add_pj, add, 1e-12), "{}", e.add_pj);
    assert!(close(e.memory_pj, mem, 1e-12), "{}", e.memory_pj);
    assert!(close(e.total_pj, mult + add + mem, 1e-12));
    assert!(e.interpolated.is_empty(), "{:?}", e.interpolated);
    assert_eq!(e.sram_kib, 8);
    // Per phase sums to the total.
    let phases: f64 = e.by_phase.iter().map(|p| p.1).sum();
    assert!(close(phases, e.total_pj, 1e-12));
    // The float arm: 55 × 3.7 + 46 × 0.9 pJ, 57 accesses of 32 bits; its storage (56 values
    // × 4 bytes = 224 bytes) also fits the 8 KB row.
    let f = energy::energy_float(&ops, &t);
    let fmem = 57.0 * 32.0 * 10.0 / 64.0;
    assert!(
        close(f.total_pj, 55.0 * 3.7 + 46.0 * 0.9 + fmem, 1e-12),
        "{}",
        f.total_pj
    );
    assert_eq!(f.storage_bytes, 224);
}

#[test]
fn bad_tables_are_refused_with_the_entry_named() {
    let good = EnergyTable::default_45nm().to_toml();
    let missing = good.replace("[integer_mul]\n8 = 0.2\n32 = 3.1\n", "");
    let err = EnergyTable::parse(&missing, "t.toml")
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("t.toml") && err.contains("missing section [integer_mul]"),
        "{err}"
    );
    let negative = good.replace("8 = 0.03", "8 = -0.03");
    let err = EnergyTable::parse(&negative, "t.toml")
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("integer_add.8 = -0.03") && err.contains("positive"),
        "{err}"
    );
    let no32 = good.replace(
        "[float_add]\n16 = 0.4\n32 = 0.9\n",
        "[float_add]\n16 = 0.4\n",
    );
    let err = EnergyTable::parse(&no32, "t.toml").unwrap_err().to_string();
    assert!(err.contains("[float_add] needs a 32-bit entry"), "{err}");
    let bad_key = good.replace("8 = 0.03", "eight = 0.03");
    let err = EnergyTable::parse(&bad_key, "t.toml")
        .unwrap_err()
        .to_string();
    assert!(err.contains("integer_add.eight"), "{err}");
    let unknown = format!("{good}\n[dram]\n1 = 2.0\n");
    let err = EnergyTable::parse(&unknown, "t.toml")
        .unwrap_err()
        .to_string();
    assert!(err.contains("dram"), "{err}");
}
