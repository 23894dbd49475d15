//! Weight files: initial parameters in (`[net] init = "FILE"`), final parameters out
//! (`tidewise train`), as NPZ archives: a zip of NPY arrays, one per tensor, as
//! `numpy.savez` writes them and `numpy.load` reads them.
//!
//! Tensor names say the layer (1-based weight layer, the layer that produces `h_l`) and the
//! kind: `layer1.forward_weights` (`[n_1, n_0]`: one row per neuron of the layer, one column
//! per input), `layer1.biases` (`[n_1]`), and for rules with feedback, on the hidden layers,
//! `layer1.feedback_weights` (`[n_1, columns]`, the columns the rule's feedback reads:
//! `n_2` for `fa`, `tp`, `dtp`, `dtp-drl`, the output size for `dfa` and `dtp-direct`) and
//! `layer1.feedback_biases` (`[n_1]`, learned inverses only: `tp`, `dtp`, `dtp-drl`).
//!
//! Loading rounds the values into the fixed arm's formats through the back end's `encode`
//! ([`init::Bound::apply`]), on a stream of its own (`rng::streams::LOADED`) after
//! `train::setup` has drawn the seeded parameters, so a run from a file and the same run on a
//! board (which receives the loaded words in its job) stay bit-identical.

pub mod export;
pub mod init;
pub mod names;
pub mod npz;

pub use export::FinalWeights;
pub use init::{Bound, InitFile, Loaded};
pub use names::{tensors, Kind, Tensor};

use std::path::PathBuf;

/// Why a weight file could not be read, matched to the network or written.
#[derive(Debug, thiserror::Error)]
pub enum WeightsError {
    /// The file cannot be read.
    #[error("cannot read weight file {path}: {source}")]
    Read {
        /// The file.
        path: PathBuf,
        /// Why.
        source: std::io::Error,
    },
    /// The file is not a complete zip archive.
    #[error("weight file {path} is not a complete NPZ archive (a zip of .npy arrays, as numpy.savez writes): {message}; a truncated or partly written file?")]
    Archive {
        /// The file.
        path: PathBuf,
        /// What the zip reader said.
        message: String,
    },
    /// One array of the archive cannot be read.
    #[error("weight file {path}, array {tensor}: {message}")]
    Entry {
        /// The file.
        path: PathBuf,
        /// The array's name.
        tensor: String,
        /// What is wrong.
        message: String,
    },
    /// An array's element type is not a float.
    #[error("weight file {path}, array {tensor}: dtype {dtype} ('{descr}') is not allowed; allowed: float32 ('<f4') or float64 ('<f8'), either byte order (numpy: a.astype(np.float32))")]
    Dtype {
        /// The file.
        path: PathBuf,
        /// The array's name.
        tensor: String,
        /// The NumPy name of the type.
        dtype: String,
        /// The type descriptor in the file.
        descr: String,
    },
    /// An array holds fewer bytes than its header declares.
    #[error("weight file {path}, array {tensor}: shape {shape:?} of {dtype} needs {need} data bytes but the array holds {have}: truncated file")]
    Truncated {
        /// The file.
        path: PathBuf,
        /// The array's name.
        tensor: String,
        /// Declared shape.
        shape: Vec<usize>,
        /// NumPy type name.
        dtype: String,
        /// Data bytes the header implies.
        need: usize,
        /// Data bytes present.
        have: usize,
    },
    /// An array holds more bytes than its header declares.
    #[error("weight file {path}, array {tensor}: shape {shape:?} needs {need} data bytes but the array holds {have}: its header and data disagree")]
    Trailing {
        /// The file.
        path: PathBuf,
        /// The array's name.
        tensor: String,
        /// Declared shape.
        shape: Vec<usize>,
        /// Data bytes the header implies.
        need: usize,
        /// Data bytes present.
        have: usize,
    },
    /// A value is NaN, infinite, or beyond the float32 range.
    #[error("weight file {path}, array {tensor}: value {value} at index {index} is not a finite float32; every initial value must be a finite number below 3.4e38 in magnitude")]
    NonFinite {
        /// The file.
        path: PathBuf,
        /// The array's name.
        tensor: String,
        /// Index in the array, as `[row, column]`.
        index: String,
        /// The value as read.
        value: f64,
    },
    /// An array is larger than a network can be.
    #[error("weight file {path}, array {tensor}: {bytes} bytes is more than the {limit} bytes any network's tensor can take")]
    TooLarge {
        /// The file.
        path: PathBuf,
        /// The array's name.
        tensor: String,
        /// Its size.
        bytes: u64,
        /// The limit.
        limit: u64,
    },
    /// A tensor's shape is not the network's.
    #[error("weight file {path}: {tensor} has shape {found:?}, but {layer} needs {expected:?}")]
    Shape {
        /// The file.
        path: PathBuf,
        /// The tensor.
        tensor: String,
        /// Shape the network needs.
        expected: Vec<usize>,
        /// Shape in the file.
        found: Vec<usize>,
        /// The network's layer, in words: `layer 1 of the network (16 inputs, 5 neurons)`.
        layer: String,
    },
    /// A tensor names a layer the network does not have.
    #[error("weight file {path}: {tensor} names layer {layer}, but the network has {layers} weight layers (sizes {sizes:?})")]
    Layer {
        /// The file.
        path: PathBuf,
        /// The tensor.
        tensor: String,
        /// The layer it names.
        layer: usize,
        /// Weight layers of the network.
        layers: usize,
        /// Layer sizes.
        sizes: Vec<usize>,
    },
    /// A required tensor is missing.
    #[error("weight file {path} has no {tensor} (shape {shape:?}); every layer needs its forward_weights and biases; arrays in the file: {present}")]
    Missing {
        /// The file.
        path: PathBuf,
        /// The tensor.
        tensor: String,
        /// Its shape.
        shape: Vec<usize>,
        /// The file's array names.
        present: String,
    },
    /// An array's name is not a tensor name.
    #[error("weight file {path}: array {name:?} is not a tensor name; names are layer<L>.forward_weights, layer<L>.biases, layer<L>.feedback_weights, layer<L>.feedback_biases; this network has: {expected}")]
    Unknown {
        /// The file.
        path: PathBuf,
        /// The array's name.
        name: String,
        /// The names this network has.
        expected: String,
    },
    /// Writing failed.
    #[error("writing weights: {0}")]
    Write(String),
}
