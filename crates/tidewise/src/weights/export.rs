//! The final parameters of both arms, taken at the last checkpoint of a run and written
//! beside `outcome.json`: `weights-float.npz` (the float arm, `float32`),
//! `weights-fixed.npz` (the fixed arm decoded, `float32`: exact for words of up to 24 bits),
//! `weights-fixed-raw.npz` (its raw words, `int8`/`int16`/`int32` as the container) and
//! `weights.json` (names, shapes, classes and formats: value = raw · 2^-frac_bits).

use std::path::Path;

use anyhow::Result;
use serde_json::{json, Value};
use tidewise_core::backend::{container_bits, Backend};

use crate::arms::{Arm, Checkpoint, Comparison, Observer};
use crate::io::write_atomic;
use crate::spec::Design;

use super::names::{tensors, Tensor};
use super::npz::{self, Values};

/// File names written by [`write()`]: the float arm.
pub const FLOAT_FILE: &str = "weights-float.npz";
/// The fixed arm decoded.
pub const FIXED_FILE: &str = "weights-fixed.npz";
/// The fixed arm's raw words.
pub const RAW_FILE: &str = "weights-fixed-raw.npz";
/// Names, shapes and formats.
pub const INDEX_FILE: &str = "weights.json";

/// One arm's parameters at the end of training.
#[derive(Clone, Debug, PartialEq)]
pub struct Snapshot {
    /// The tensors, in `Net::params` order.
    pub tensors: Vec<Tensor>,
    /// Their real values (decoded for the fixed arm).
    pub decoded: Vec<Vec<f32>>,
    /// Raw words, sign-extended (fixed arm only).
    pub raw: Option<Vec<Vec<i32>>>,
}

/// An observer keeping both arms' parameters after the last epoch.
#[derive(Clone, Debug, Default)]
pub struct FinalWeights {
    epochs: u16,
    /// The float arm's.
    pub float: Option<Snapshot>,
    /// The fixed arm's.
    pub fixed: Option<Snapshot>,
}

impl FinalWeights {
    /// Keeps the parameters after epoch `epochs` (the run's last).
    pub fn new(epochs: u16) -> FinalWeights {
        FinalWeights {
            epochs,
            ..FinalWeights::default()
        }
    }
}

impl Observer for FinalWeights {
    fn checkpoint<B: Backend + Clone>(&mut self, at: Checkpoint<'_, B>) {
        if at.epoch != self.epochs {
            return;
        }
        let ts = tensors(&at.plan);
        let params = at.net.params();
        let decoded = ts
            .iter()
            .map(|t| {
                t.of(&params)
                    .iter()
                    .map(|&v| at.backend.decode(t.tag(), v))
                    .collect()
            })
            .collect();
        let raw = at.backend.is_fixed().then(|| {
            ts.iter()
                .map(|t| {
                    t.of(&params)
                        .iter()
                        .map(|&v| B::raw_bits(v) as i32)
                        .collect()
                })
                .collect()
        });
        let snap = Snapshot {
            tensors: ts,
            decoded,
            raw,
        };
        match at.arm {
            Arm::Fixed => self.fixed = Some(snap),
            Arm::Float => self.float = Some(snap),
        }
    }
}

fn arrays(s: &Snapshot, f: impl Fn(usize) -> Values) -> Vec<(String, Vec<usize>, Values)> {
    s.tensors
        .iter()
        .enumerate()
        .map(|(i, t)| (t.name(), t.shape.clone(), f(i)))
        .collect()
}

/// The raw words of `words` in a container of `bits` bits.
fn raw_values(words: &[i32], bits: u32) -> Values {
    // Each word is a sign-extended value of at most `bits` bits, so the casts keep it.
    match bits {
        8 => Values::I8(words.iter().map(|&w| w as i8).collect()),
        16 => Values::I16(words.iter().map(|&w| w as i16).collect()),
        _ => Values::I32(words.to_vec()),
    }
}

/// `weights.json`: what the files hold.
pub fn index_json(design: &Design, fixed: &Snapshot, cmp: &Comparison) -> Value {
    let bits = container_bits(&design.fixed);
    let list: Vec<Value> = fixed
        .tensors
        .iter()
        .map(|t| {
            let class = t.kind.class();
            let f = design.fixed.classes[class.index()].format;
            json!({
                "name": t.name(),
                "layer": t.layer,
                "kind": t.kind.name(),
                "shape": t.shape,
                "class": class.name(),
                "format": f.to_string(),
                "word_bits": f.word(),
                "frac_bits": f.frac(),
                "overflow": format!("{:?}", f.overflow()).to_lowercase(),
            })
        })
        .collect();
    json!({
        "files": {
            "float": FLOAT_FILE,
            "fixed_decoded": FIXED_FILE,
            "fixed_raw": RAW_FILE,
        },
        "raw_dtype": format!("int{bits}"),
        "container_bits": bits,
        "decode": "value = raw * 2**-frac_bits",
        "digests": { "fixed": cmp.fixed.digest, "float": cmp.float.digest },
        "tensors": list,
    })
}

/// Writes the four files into `dir`; returns their names.
pub fn write(
    dir: &Path,
    design: &Design,
    w: &FinalWeights,
    cmp: &Comparison,
) -> Result<Vec<&'static str>> {
    let (Some(float), Some(fixed)) = (&w.float, &w.fixed) else {
        anyhow::bail!("the run ended before its last epoch: no final weights to write");
    };
    let bits = container_bits(&design.fixed);
    let raw = fixed.raw.as_deref().unwrap_or(&[]);
    let files = [
        (
            FLOAT_FILE,
            arrays(float, |i| Values::F32(float.decoded[i].clone())),
        ),
        (
            FIXED_FILE,
            arrays(fixed, |i| Values::F32(fixed.decoded[i].clone())),
        ),
        (
            RAW_FILE,
            arrays(fixed, |i| {
                raw_values(raw.get(i).map_or(&[][..], |v| v), bits)
            }),
        ),
    ];
    for (name, list) in files {
        write_atomic(&dir.join(name), &npz::write(&list)?)?;
    }
    let text = serde_json::to_string_pretty(&index_json(design, fixed, cmp))?;
    write_atomic(&dir.join(INDEX_FILE), text.as_bytes())?;
    Ok(vec![FLOAT_FILE, FIXED_FILE, RAW_FILE, INDEX_FILE])
}
