//! Initial parameters from a file (`[net] init = "FILE"`): read once, matched to each
//! network (names and shapes), then encoded into the run's arm.

use std::path::{Path, PathBuf};

use tidewise_core::backend::Backend;
use tidewise_core::network::Net;
use tidewise_core::plan::Plan;

use super::names::{self, tensors, Tensor};
use super::npz::{self, Array};
use super::WeightsError;

/// A weight file as read: every array checked for type, length and finiteness.
#[derive(Clone, Debug)]
pub struct InitFile {
    /// Where it was read from.
    pub path: PathBuf,
    /// FNV-1a (64-bit) of the file's bytes, 16 hex digits: which file a run started from.
    pub fnv1a64: String,
    /// Its arrays, in archive order.
    pub arrays: Vec<Array>,
}

/// An [`InitFile`] matched to one network.
#[derive(Clone, Debug)]
pub struct Bound<'a> {
    /// Tensors loaded from the file, in `Net::params` order (the encoding order).
    pub loaded: Vec<(Tensor, &'a [f32])>,
    /// Feedback tensors the network has but the file lacks: drawn from the seed.
    pub drawn: Vec<String>,
    /// Feedback tensors in the file that this network's rule does not have: ignored.
    pub ignored: Vec<String>,
}

/// What loading one tensor did.
#[derive(Clone, Debug, PartialEq, Eq, serde::Serialize)]
pub struct Loaded {
    /// Tensor name.
    pub name: String,
    /// Values loaded.
    pub values: usize,
    /// Values that saturated (or wrapped) when encoded into the arm's format.
    pub saturated: u64,
}

fn fnv1a64(bytes: &[u8]) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for &b in bytes {
        h ^= u64::from(b);
        h = h.wrapping_mul(0x0000_0100_0000_01b3);
    }
    h
}

impl InitFile {
    /// Reads and checks the file at `path`.
    pub fn read(path: &Path) -> Result<InitFile, WeightsError> {
        let bytes = std::fs::read(path).map_err(|source| WeightsError::Read {
            path: path.to_path_buf(),
            source,
        })?;
        Ok(InitFile {
            path: path.to_path_buf(),
            fnv1a64: format!("{:016x}", fnv1a64(&bytes)),
            arrays: npz::read_bytes(path, &bytes)?,
        })
    }

    /// Matches the file's arrays to the tensors of `plan`: every name must be a tensor name
    /// of a layer the network has, every shape the network's, and every layer's forward
    /// weights and biases present.
    pub fn bind(&self, plan: &Plan) -> Result<Bound<'_>, WeightsError> {
        let want = tensors(plan);
        let expected = || {
            want.iter()
                .map(|t| format!("{} {:?}", t.name(), t.shape))
                .collect::<Vec<_>>()
                .join(", ")
        };
        let sizes: Vec<usize> = (0..=plan.layers()).map(|l| plan.n(l)).collect();
        let mut ignored = Vec::new();
        let mut found: Vec<Option<&Array>> = vec![None; want.len()];
        for a in &self.arrays {
            let Some((layer, kind)) = names::parse(&a.name) else {
                return Err(WeightsError::Unknown {
                    path: self.path.clone(),
                    name: a.name.clone(),
                    expected: expected(),
                });
            };
            if layer > plan.layers() {
                return Err(WeightsError::Layer {
                    path: self.path.clone(),
                    tensor: a.name.clone(),
                    layer,
                    layers: plan.layers(),
                    sizes,
                });
            }
            let Some(i) = want.iter().position(|t| t.layer == layer && t.kind == kind) else {
                // Only feedback can be absent from a layer the network has.
                ignored.push(a.name.clone());
                continue;
            };
            let t = &want[i];
            if a.shape != t.shape {
                let detail = if kind.optional() {
                    format!(
                        "{} neurons; rule {}'s feedback there reads {} values",
                        plan.n(layer),
                        plan.rule.name(),
                        plan.fb_cols(layer)
                    )
                } else {
                    format!("{} inputs, {} neurons", plan.n(layer - 1), plan.n(layer))
                };
                return Err(WeightsError::Shape {
                    path: self.path.clone(),
                    tensor: a.name.clone(),
                    expected: t.shape.clone(),
                    found: a.shape.clone(),
                    layer: format!("layer {layer} of the network ({detail})"),
                });
            }
            found[i] = Some(a);
        }
        let mut loaded = Vec::new();
        let mut drawn = Vec::new();
        for (t, a) in want.into_iter().zip(found) {
            match a {
                Some(a) => loaded.push((t, &a.values[..])),
                None if t.kind.optional() => drawn.push(t.name()),
                None => {
                    return Err(WeightsError::Missing {
                        path: self.path.clone(),
                        tensor: t.name(),
                        shape: t.shape,
                        present: self
                            .arrays
                            .iter()
                            .map(|a| a.name.as_str())
                            .collect::<Vec<_>>()
                            .join(", "),
                    })
                }
            }
        }
        Ok(Bound {
            loaded,
            drawn,
            ignored,
        })
    }
}

impl Bound<'_> {
    /// Overwrites the loaded tensors of `net` with the file's values encoded by `enc`, in
    /// `Net::params` order, each tensor counted against its layer: `enc` is the arm's back
    /// end on the loading stream (the float back end keeps the values; the fixed one rounds
    /// them into the class formats with the configured rounding and overflow).
    pub fn apply<B: Backend>(&self, net: &mut Net<'_, B::S>, enc: &mut B) -> Vec<Loaded> {
        let mut parts = net.params_mut();
        let mut out = Vec::with_capacity(self.loaded.len());
        for (t, values) in &self.loaded {
            enc.set_layer(t.layer - 1);
            let before = enc.counters().total_saturations();
            let dst = parts
                .get_mut(t.kind.part())
                .and_then(|p| p.get_mut(t.range.clone()));
            if let Some(dst) = dst {
                for (d, &x) in dst.iter_mut().zip(values.iter()) {
                    *d = enc.encode(t.tag(), x);
                }
            }
            out.push(Loaded {
                name: t.name(),
                values: t.len(),
                saturated: enc.counters().total_saturations() - before,
            });
        }
        out
    }
}
