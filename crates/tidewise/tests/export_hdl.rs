//! The outside check of the hardware export: an independently written SystemVerilog
//! reference of the datapath (`hdl/`: a saturating or wrapping multiply-accumulate register,
//! one rounding by `>>>`, one row update), simulated with Icarus Verilog, replays the
//! exported operation trace and must match every result word. It relies on the language's
//! own signed arithmetic (IEEE 1800-2017, 11.4.10 shift operators; 11.8 expression
//! signedness; docs/references.md [38]), not on values computed by tidewise beyond the exported vectors. The package
//! must compile with `iverilog -g2012` and give the design's numbers; the C header must pass
//! `cc -fsyntax-only` (ISO C99, `<stdint.h>`; docs/references.md [40]).
//!
//! Skipped with a message when `iverilog` is missing (install it with `ci/iverilog.sh`); set
//! `TIDEWISE_REQUIRE_IVERILOG=1` to make a missing simulator a failure instead. The data are
//! the invented pump generator (made up, nothing measured).

use std::path::{Path, PathBuf};
use std::process::Command;

use tidewise::export;
use tidewise::spec;

const BASE: &str = "[data]\nsource = \"pump\"\nsamples = 60\n\
                    [net]\nhidden = [6]\n[rule]\nlr = 0.05\nwarmup_epochs = 0\n\
                    [run]\nepochs = 1\nseed = 11\n";

fn available(test: &str) -> bool {
    let ok = Command::new("iverilog").arg("-V").output().is_ok()
        && Command::new("vvp").arg("-V").output().is_ok();
    if ok {
        return true;
    }
    let msg =
        format!("{test}: skipped: `iverilog`/`vvp` not installed (run `bash ci/iverilog.sh`)");
    if std::env::var_os("TIDEWISE_REQUIRE_IVERILOG").is_some_and(|v| !v.is_empty() && v != "0") {
        panic!("{msg}; TIDEWISE_REQUIRE_IVERILOG is set, so this is a failure");
    }
    eprintln!("{msg}");
    false
}

fn hdl_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../../hdl")
}

/// Compiles the reference bench into `dir`.
fn bench(dir: &Path) -> PathBuf {
    let out = dir.join("tb.vvp");
    let h = hdl_dir();
    let r = Command::new("iverilog")
        .args(["-g2012", "-o"])
        .arg(&out)
        .arg(h.join("tw_ref_pkg.sv"))
        .arg(h.join("tw_mac_reg.sv"))
        .arg(h.join("tw_trace_tb.sv"))
        .output()
        .unwrap();
    assert!(
        r.status.success(),
        "iverilog: {}",
        String::from_utf8_lossy(&r.stderr)
    );
    out
}

/// Runs the bench on a trace; returns its stdout.
fn simulate(tb: &Path, trace: &Path) -> String {
    let depth = std::fs::read_to_string(trace)
        .unwrap()
        .lines()
        .filter(|l| !l.starts_with("//") && !l.trim().is_empty())
        .count();
    let r = Command::new("vvp")
        .arg("-n")
        .arg(tb)
        .arg(format!("+trace={}", trace.display()))
        .arg(format!("+depth={depth}"))
        .output()
        .unwrap();
    String::from_utf8_lossy(&r.stdout).into_owned()
}

/// The count after `key=` in the bench's summary line.
fn count(out: &str, key: &str) -> u64 {
    out.split_whitespace()
        .find_map(|w| w.strip_prefix(&format!("{key}=")))
        .and_then(|v| v.parse().ok())
        .unwrap_or_else(|| panic!("no {key}= in {out}"))
}

/// `--with`s of a design of `bits`-bit words with overflow `policy` and a register small
/// enough to overflow.
fn design_sets(bits: u32, policy: &str, rounding: &str) -> Vec<String> {
    let (w, act, acc) = if bits == 8 {
        ("Q1.6", "Q2.5", 12)
    } else {
        ("Q2.13", "Q3.12", 26)
    };
    vec![
        format!("fixed.forward_weights={w}"),
        format!("fixed.biases={act}"),
        format!("fixed.feedback_weights={w}"),
        format!("fixed.activations={act}"),
        format!("fixed.noise={act}"),
        format!("fixed.accumulator={acc}"),
        format!("fixed.accumulator_overflow={policy}"),
        format!("fixed.overflow={policy}"),
        format!("fixed.rounding={rounding}"),
    ]
}

#[test]
fn reference_datapath_matches_the_exported_trace() {
    if !available("reference_datapath_matches_the_exported_trace") {
        return;
    }
    let tmp = tempfile::tempdir().unwrap();
    let tb = bench(tmp.path());
    // dtp-direct learns its feedback; dfa's is fixed and random.
    for rule in ["dtp-direct", "dfa"] {
        for bits in [8, 16] {
            for (policy, rounding) in [
                ("saturate", "nearest"),
                ("wrap", "floor"),
                ("saturate", "stochastic"),
                ("wrap", "stochastic"),
            ] {
                let mut sets = design_sets(bits, policy, rounding);
                sets.push(format!("rule.name={rule}"));
                let (s, d) = spec::parse(BASE, &sets).unwrap();
                let dir = tmp
                    .path()
                    .join(format!("{rule}-{bits}-{policy}-{rounding}"));
                let e = export::export(&s, &d, &dir, 3, false).unwrap();
                let out = simulate(&tb, &dir.join("trace.mem"));
                let what = format!("{rule}, {bits} bits, {policy}, {rounding}");
                assert!(out.contains("TRACE PASS"), "{what}: {out}");
                assert_eq!(count(&out, "macs"), e.records.0 as u64, "{what}");
                assert_eq!(count(&out, "updates"), e.records.1 as u64, "{what}");
                // The small register does overflow, so the policy is exercised.
                assert!(count(&out, "acc_overflows") > 0, "{what}: {out}");
            }
        }
    }
}

#[test]
fn reference_datapath_matches_when_results_and_weights_clip() {
    if !available("reference_datapath_matches_when_results_and_weights_clip") {
        return;
    }
    let tmp = tempfile::tempdir().unwrap();
    let tb = bench(tmp.path());
    // Narrow weights and biases with a large rate: results and updated weights leave their
    // words, so each destination's saturation or wrapping is exercised. (Activations are
    // kept at Q0.7: narrower ones would wrap the constant 1 and the tanh knots to nonsense.)
    for rule in ["dtp-direct", "dfa"] {
        for policy in ["saturate", "wrap"] {
            let sets: Vec<String> = [
                "fixed.forward_weights=Q-2.9",
                "fixed.activations=Q0.7",
                "fixed.biases=Q-1.8",
                "fixed.accumulator=24",
                "rule.lr=0.5",
                "fixed.rounding=floor",
            ]
            .iter()
            .map(|s| s.to_string())
            .chain([
                format!("fixed.overflow={policy}"),
                format!("rule.name={rule}"),
            ])
            .collect();
            let (s, d) = spec::parse(BASE, &sets).unwrap();
            let dir = tmp.path().join(format!("{rule}-{policy}"));
            export::export(&s, &d, &dir, 8, false).unwrap();
            let out = simulate(&tb, &dir.join("trace.mem"));
            assert!(out.contains("TRACE PASS"), "{rule} {policy}: {out}");
            assert!(count(&out, "clipped") > 0, "{rule} {policy}: {out}");
        }
    }
}

/// Changes word `i` (0-based, comments skipped) of a memory file by `f`.
fn corrupt(path: &Path, i: usize, f: impl Fn(u64) -> u64) {
    let text = std::fs::read_to_string(path).unwrap();
    let mut k = 0;
    let lines: Vec<String> = text
        .lines()
        .map(|l| {
            if l.starts_with("//") {
                return l.to_string();
            }
            k += 1;
            if k - 1 == i {
                format!("{:016x}", f(u64::from_str_radix(l, 16).unwrap()))
            } else {
                l.to_string()
            }
        })
        .collect();
    std::fs::write(path, lines.join("\n") + "\n").unwrap();
}

fn words(path: &Path) -> Vec<i64> {
    let text = std::fs::read_to_string(path).unwrap();
    export::memfile::read(&text, 64, "trace.mem").unwrap()
}

#[test]
fn a_corrupted_trace_fails_the_simulation() {
    if !available("a_corrupted_trace_fails_the_simulation") {
        return;
    }
    let tmp = tempfile::tempdir().unwrap();
    let tb = bench(tmp.path());
    let mut sets = design_sets(8, "saturate", "nearest");
    sets.push("rule.name=dtp-direct".into());
    let (s, d) = spec::parse(BASE, &sets).unwrap();
    let dir = tmp.path().join("x");
    export::export(&s, &d, &dir, 2, false).unwrap();
    let trace = dir.join("trace.mem");
    let good = std::fs::read_to_string(&trace).unwrap();
    assert!(simulate(&tb, &trace).contains("TRACE PASS"));
    let w = words(&trace);
    // The first record is a multiply-accumulate: its result follows 15 header words and 2n operands.
    assert_eq!(w[0], 1);
    let n = w[1] as usize;
    let result = 15 + 2 * n;
    corrupt(&trace, result, |v| v ^ 1);
    let out = simulate(&tb, &trace);
    assert!(
        out.contains("MISMATCH record 0 (mac)") && out.contains("TRACE FAIL"),
        "{out}"
    );
    // A weight after a row update changed instead.
    std::fs::write(&trace, &good).unwrap();
    let first_update = {
        let mut p = 0;
        while w[p] == 1 {
            p += 15 + 2 * w[p + 1] as usize + 1;
        }
        p
    };
    assert_eq!(w[first_update], 2);
    let n = w[first_update + 1] as usize;
    // The row after the update: header 16, x, thresholds and before (3n), then the step.
    corrupt(&trace, first_update + 16 + 3 * n + 1, |v| v.wrapping_add(1));
    let out = simulate(&tb, &trace);
    assert!(out.contains("(row)") && out.contains("TRACE FAIL"), "{out}");
}

#[test]
fn package_and_header_compile_with_the_designs_numbers() {
    if !available("package_and_header_compile_with_the_designs_numbers") {
        return;
    }
    let tmp = tempfile::tempdir().unwrap();
    let mut sets = design_sets(16, "wrap", "floor");
    sets.push("fixed.forward_weights=[\"Q2.13\", \"Q1.14\"]".into());
    let (s, d) = spec::parse(BASE, &sets).unwrap();
    let dir = tmp.path().join("p");
    export::export(&s, &d, &dir, 2, false).unwrap();
    // Each layer's own fraction reaches the bench through the trace's records.
    let tb = bench(tmp.path());
    let out = simulate(&tb, &dir.join("trace.mem"));
    assert!(out.contains("TRACE PASS"), "per-layer formats: {out}");
    let top = tmp.path().join("top.sv");
    std::fs::write(
        &top,
        "module top; import tw_design_pkg::*; initial begin \
         $display(\"%0d %0d %0d %0d %0d %0d %0d %0d\", FORWARD_WEIGHTS_L1_FRAC, FORWARD_WEIGHTS_L2_FRAC, \
         ACTIVATIONS_WORD, ACC_WORD, ACC_OVERFLOW, N0, N1, N2); end endmodule\n",
    )
    .unwrap();
    let vvp = tmp.path().join("top.vvp");
    let r = Command::new("iverilog")
        .args(["-g2012", "-o"])
        .arg(&vvp)
        .arg(dir.join("tw_design_pkg.sv"))
        .arg(&top)
        .output()
        .unwrap();
    assert!(r.status.success(), "{}", String::from_utf8_lossy(&r.stderr));
    let r = Command::new("vvp").arg("-n").arg(&vvp).output().unwrap();
    // The spec's numbers: Q2.13 then Q1.14 weights, Q3.12 activations (16 bits), a 26-bit
    // wrapping register (code 1), a 16-6-4 network (pump: 16 features, 4 states).
    assert_eq!(
        String::from_utf8_lossy(&r.stdout).trim(),
        "13 14 16 26 1 16 6 4"
    );
    let cc = Command::new("cc")
        .args([
            "-fsyntax-only",
            "-std=c99",
            "-Wall",
            "-Wextra",
            "-Werror",
            "-pedantic",
            "-x",
            "c",
        ])
        .arg(dir.join("tw_design.h"))
        .output();
    match cc {
        Ok(r) => assert!(
            r.status.success(),
            "cc: {}",
            String::from_utf8_lossy(&r.stderr)
        ),
        Err(e) => eprintln!("header check skipped: no `cc` ({e})"),
    }
}
