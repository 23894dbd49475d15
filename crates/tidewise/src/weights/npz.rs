//! NPZ archives of NPY arrays, read and written with the `ndarray-npy` crate (the NPY header
//! and data) over the `zip` crate (the archive).
//!
//! Reading checks each array before its data are allocated: the entry's size against a
//! limit, the header's element type (float32 or float64, either byte order; numpy's default
//! float64 is converted to the nearest float32), the data length against the declared shape,
//! and every value for NaN, infinity and the float32 range. Arrays in Fortran order come out
//! in row-major (C) order.

use std::io::{Cursor, Read};
use std::path::Path;

use ndarray::{ArrayD, IxDyn};
use ndarray_npy::npy::header::Header;
use ndarray_npy::{NpzWriter, ReadNpyExt, WritableElement};

use super::WeightsError;

/// Largest array read, in bytes: a 4096 × 4096 float64 matrix, the largest a network takes
/// (hidden layers are at most 4096 wide), with room to spare.
pub const MAX_ARRAY_BYTES: u64 = 1 << 30;

/// One array as read: name (without `.npy`), row-major shape and values.
#[derive(Clone, Debug, PartialEq)]
pub struct Array {
    /// Name in the archive, the `.npy` suffix removed.
    pub name: String,
    /// Shape, row-major.
    pub shape: Vec<usize>,
    /// Values in row-major order.
    pub values: Vec<f32>,
    /// NumPy type name in the file (`float32` or `float64`).
    pub dtype: &'static str,
}

/// Values to write.
#[derive(Clone, Debug, PartialEq)]
pub enum Values {
    /// `float32`.
    F32(Vec<f32>),
    /// `int8`.
    I8(Vec<i8>),
    /// `int16`.
    I16(Vec<i16>),
    /// `int32`.
    I32(Vec<i32>),
}

/// The NumPy name of an array-protocol type string such as `<i8` (a description for errors).
pub fn numpy_name(descr: &str) -> String {
    let body = descr.trim_start_matches(['<', '>', '=', '|']);
    let (kind, size) = body.split_at(body.len().min(1));
    let bits = size.parse::<u32>().map(|n| n * 8).unwrap_or(0);
    match kind {
        "f" => format!("float{bits}"),
        "i" => format!("int{bits}"),
        "u" => format!("uint{bits}"),
        "c" => format!("complex{bits}"),
        "b" => "bool".into(),
        "O" => "object".into(),
        "U" => "str".into(),
        "S" => "bytes".into(),
        _ => "unknown".into(),
    }
}

/// `[i, j]` of the flat row-major position `flat` in `shape`.
pub fn index_of(flat: usize, shape: &[usize]) -> String {
    let mut rest = flat;
    let mut idx = vec![0; shape.len()];
    for (slot, &n) in idx.iter_mut().zip(shape).rev() {
        *slot = rest % n.max(1);
        rest /= n.max(1);
    }
    let parts: Vec<String> = idx.iter().map(|i| i.to_string()).collect();
    format!("[{}]", parts.join(", "))
}

/// Reads every array of the NPZ file at `path`.
pub fn read(path: &Path) -> Result<Vec<Array>, WeightsError> {
    let bytes = std::fs::read(path).map_err(|source| WeightsError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    read_bytes(path, &bytes)
}

/// Reads every array of an NPZ archive held in `bytes` (`path` names it in errors).
pub fn read_bytes(path: &Path, bytes: &[u8]) -> Result<Vec<Array>, WeightsError> {
    let archive = |message: String| WeightsError::Archive {
        path: path.to_path_buf(),
        message,
    };
    let mut zip = zip::ZipArchive::new(Cursor::new(bytes)).map_err(|e| archive(e.to_string()))?;
    let mut out = Vec::with_capacity(zip.len());
    for i in 0..zip.len() {
        let mut entry = zip.by_index(i).map_err(|e| archive(e.to_string()))?;
        if entry.is_dir() {
            continue;
        }
        let name = entry
            .name()
            .strip_suffix(".npy")
            .unwrap_or(entry.name())
            .to_string();
        let entry_err = |message: String| WeightsError::Entry {
            path: path.to_path_buf(),
            tensor: name.clone(),
            message,
        };
        if entry.size() > MAX_ARRAY_BYTES {
            return Err(WeightsError::TooLarge {
                path: path.to_path_buf(),
                tensor: name,
                bytes: entry.size(),
                limit: MAX_ARRAY_BYTES,
            });
        }
        let mut data = Vec::with_capacity(usize::try_from(entry.size()).unwrap_or(0));
        (&mut entry)
            .take(MAX_ARRAY_BYTES + 1)
            .read_to_end(&mut data)
            .map_err(|e| {
                entry_err(format!(
                    "cannot be unpacked ({e}): a truncated or corrupted file?"
                ))
            })?;
        drop(entry);
        out.push(parse_npy(path, name, &data)?);
    }
    Ok(out)
}

/// One NPY array.
fn parse_npy(path: &Path, name: String, data: &[u8]) -> Result<Array, WeightsError> {
    let entry_err = |message: String| WeightsError::Entry {
        path: path.to_path_buf(),
        tensor: name.clone(),
        message,
    };
    let mut rest = data;
    let header =
        Header::from_reader(&mut rest).map_err(|e| entry_err(format!("not an NPY array: {e}")))?;
    let descr = header.type_descriptor.to_string();
    let descr = descr.trim_matches(['\'', '"']).to_string();
    let (dtype, item) = match descr.as_str() {
        "<f4" | ">f4" => ("float32", 4),
        "<f8" | ">f8" => ("float64", 8),
        _ => {
            return Err(WeightsError::Dtype {
                path: path.to_path_buf(),
                tensor: name,
                dtype: numpy_name(&descr),
                descr,
            })
        }
    };
    let shape = header.shape.clone();
    let need = shape
        .iter()
        .try_fold(item, |a: usize, &n| a.checked_mul(n))
        .filter(|&n| n as u64 <= MAX_ARRAY_BYTES)
        .ok_or_else(|| entry_err(format!("declared shape {shape:?} is too large")))?;
    if rest.len() < need {
        return Err(WeightsError::Truncated {
            path: path.to_path_buf(),
            tensor: name,
            shape,
            dtype: dtype.into(),
            need,
            have: rest.len(),
        });
    }
    if rest.len() > need {
        return Err(WeightsError::Trailing {
            path: path.to_path_buf(),
            tensor: name,
            shape,
            need,
            have: rest.len(),
        });
    }
    let parse = |e: ndarray_npy::ReadNpyError| entry_err(format!("data cannot be read: {e}"));
    // `iter` walks the logical (row-major) order whatever the memory order.
    let wide: Vec<f64> = if item == 4 {
        ArrayD::<f32>::read_npy(data)
            .map_err(parse)?
            .iter()
            .map(|&v| f64::from(v))
            .collect()
    } else {
        ArrayD::<f64>::read_npy(data)
            .map_err(parse)?
            .iter()
            .copied()
            .collect()
    };
    if let Some((flat, &value)) = wide
        .iter()
        .enumerate()
        .find(|(_, v)| !v.is_finite() || v.abs() > f64::from(f32::MAX))
    {
        return Err(WeightsError::NonFinite {
            path: path.to_path_buf(),
            index: index_of(flat, &shape),
            tensor: name,
            value,
        });
    }
    Ok(Array {
        name,
        shape,
        values: wide.iter().map(|&v| v as f32).collect(),
        dtype,
    })
}

/// An NPZ archive (uncompressed, as `numpy.savez` writes) of `arrays`, each named
/// `<name>.npy` inside.
pub fn write(arrays: &[(String, Vec<usize>, Values)]) -> Result<Vec<u8>, WeightsError> {
    let mut npz = NpzWriter::new(Cursor::new(Vec::new()));
    for (name, shape, values) in arrays {
        match values {
            Values::F32(v) => add(&mut npz, name, shape, v),
            Values::I8(v) => add(&mut npz, name, shape, v),
            Values::I16(v) => add(&mut npz, name, shape, v),
            Values::I32(v) => add(&mut npz, name, shape, v),
        }?;
    }
    Ok(npz.finish().map_err(write_error)?.into_inner())
}

fn write_error(e: impl std::fmt::Display) -> WeightsError {
    WeightsError::Write(e.to_string())
}

fn add<T: WritableElement + Clone>(
    npz: &mut NpzWriter<Cursor<Vec<u8>>>,
    name: &str,
    shape: &[usize],
    values: &[T],
) -> Result<(), WeightsError> {
    let array = ArrayD::from_shape_vec(IxDyn(shape), values.to_vec()).map_err(write_error)?;
    npz.add_array(name, &array).map_err(write_error)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_and_indices() {
        assert_eq!(numpy_name("<i8"), "int64");
        assert_eq!(numpy_name("<f2"), "float16");
        assert_eq!(numpy_name("|b1"), "bool");
        assert_eq!(index_of(0, &[5, 16]), "[0, 0]");
        assert_eq!(index_of(17, &[5, 16]), "[1, 1]");
        assert_eq!(index_of(3, &[4]), "[3]");
    }

    #[test]
    fn written_arrays_read_back() {
        let arrays = vec![
            (
                "a".to_string(),
                vec![2, 3],
                Values::F32(vec![0.5, -1.0, 2.25, 3.0, -0.125, 1e-3]),
            ),
            ("b".to_string(), vec![2], Values::F32(vec![7.0, -7.0])),
        ];
        let bytes = write(&arrays).unwrap();
        let back = read_bytes(Path::new("mem.npz"), &bytes).unwrap();
        assert_eq!(back.len(), 2);
        assert_eq!(back[0].name, "a");
        assert_eq!(back[0].shape, [2, 3]);
        assert_eq!(back[0].values, [0.5, -1.0, 2.25, 3.0, -0.125, 1e-3]);
        assert_eq!(back[1].values, [7.0, -7.0]);
        // Integer arrays are written, but refused as initial values.
        let ints = write(&[("w".into(), vec![2], Values::I16(vec![1, -2]))]).unwrap();
        let e = read_bytes(Path::new("mem.npz"), &ints)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("int16") && e.contains("'<i2'") && e.contains("float32"),
            "{e}"
        );
    }
}
