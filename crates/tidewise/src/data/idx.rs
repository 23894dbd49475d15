//! IDX files: the open array format of the classic handwritten-digit benchmark files.
//!
//! Layout: bytes 0-1 are zero; byte 2 is the element type (0x08 u8, 0x09 i8, 0x0B i16,
//! 0x0C i32, 0x0D f32, 0x0E f64); byte 3 is the number of dimensions `n`; then `n` big-endian
//! `u32` sizes; then the elements, big-endian, last dimension fastest. The image file has
//! dimensions `N x d1 x d2 ...` and each sample becomes one row of `d1 * d2 * ...` features
//! (converted to `f32` as they are, no scaling). The label file has dimension `N`, type u8.
//! Every size is checked before anything is allocated, so no input can make the reader panic or
//! allocate more than the input's own size.

use std::path::Path;

use super::{DataError, Dataset};

/// Reads an image file and a label file (see the module documentation).
pub fn load_idx(images: &Path, labels: &Path) -> Result<Dataset, DataError> {
    let read = |p: &Path| {
        std::fs::read(p).map_err(|err| DataError::Io {
            path: p.display().to_string(),
            err,
        })
    };
    let img = read(images)?;
    let lab = read(labels)?;
    parse_idx_named(
        &img,
        &lab,
        &images.display().to_string(),
        &labels.display().to_string(),
    )
}

/// Parses an image file and a label file held in memory.
pub fn parse_idx(images: &[u8], labels: &[u8]) -> Result<Dataset, DataError> {
    parse_idx_named(images, labels, "IDX images", "IDX labels")
}

/// A parsed IDX header: type code, dimensions, element size and the data slice.
struct Array<'a> {
    code: u8,
    dims: Vec<u32>,
    elem: usize,
    data: &'a [u8],
}

fn element_size(code: u8) -> Option<usize> {
    match code {
        0x08 | 0x09 => Some(1),
        0x0B => Some(2),
        0x0C | 0x0D => Some(4),
        0x0E => Some(8),
        _ => None,
    }
}

fn parse_array<'a>(bytes: &'a [u8], file: &str) -> Result<Array<'a>, DataError> {
    let truncated = |what, needed: u64| DataError::IdxTruncated {
        file: file.to_string(),
        what,
        needed,
        found: bytes.len(),
    };
    let [m0, m1, code, ndim] = match bytes.get(..4) {
        Some(&[a, b, c, d]) => [a, b, c, d],
        _ => return Err(truncated("the 4-byte magic", 4)),
    };
    if m0 != 0 || m1 != 0 {
        return Err(DataError::IdxMagic {
            file: file.to_string(),
            found: [m0, m1],
        });
    }
    let elem = element_size(code).ok_or(DataError::IdxType {
        file: file.to_string(),
        code,
    })?;
    if ndim == 0 {
        return Err(DataError::IdxNoDims {
            file: file.to_string(),
        });
    }
    let header = 4 + 4 * usize::from(ndim);
    let dim_bytes = bytes
        .get(4..header)
        .ok_or_else(|| truncated("the header with its dimension sizes", header as u64))?;
    let dims: Vec<u32> = dim_bytes
        .chunks_exact(4)
        .map(|c| u32::from_be_bytes([c[0], c[1], c[2], c[3]]))
        .collect();
    let overflow = || DataError::IdxOverflow {
        file: file.to_string(),
        dims: dims.clone(),
    };
    let mut count: u64 = 1;
    for &d in &dims {
        count = count.checked_mul(u64::from(d)).ok_or_else(overflow)?;
    }
    let data_len = count.checked_mul(elem as u64).ok_or_else(overflow)?;
    let total = data_len.checked_add(header as u64).ok_or_else(overflow)?;
    let found = bytes.len() as u64;
    if found < total {
        return Err(truncated(
            "the header and the data its dimensions give",
            total,
        ));
    }
    if found > total {
        return Err(DataError::IdxTrailing {
            file: file.to_string(),
            dims,
            expected: total,
            found: bytes.len(),
            extra: found - total,
        });
    }
    Ok(Array {
        code,
        dims,
        elem,
        data: &bytes[header..],
    })
}

/// Element `i` of an array, as f64 (exact for every IDX type).
fn element(a: &Array<'_>, i: usize) -> f64 {
    let b = &a.data[i * a.elem..(i + 1) * a.elem];
    match (a.code, b) {
        (0x08, &[x]) => f64::from(x),
        (0x09, &[x]) => f64::from(x as i8),
        (0x0B, &[x, y]) => f64::from(i16::from_be_bytes([x, y])),
        (0x0C, &[x, y, z, w]) => f64::from(i32::from_be_bytes([x, y, z, w])),
        (0x0D, &[x, y, z, w]) => f64::from(f32::from_be_bytes([x, y, z, w])),
        (0x0E, &[x0, x1, x2, x3, x4, x5, x6, x7]) => {
            f64::from_be_bytes([x0, x1, x2, x3, x4, x5, x6, x7])
        }
        // parse_array only accepts the codes above, each with its element size.
        _ => f64::NAN,
    }
}

fn parse_idx_named(
    images: &[u8],
    labels: &[u8],
    images_file: &str,
    labels_file: &str,
) -> Result<Dataset, DataError> {
    let img = parse_array(images, images_file)?;
    let lab = parse_array(labels, labels_file)?;
    if lab.code != 0x08 || lab.dims.len() != 1 {
        return Err(DataError::IdxLabelShape {
            file: labels_file.to_string(),
            code: lab.code,
            dims: lab.dims,
        });
    }
    let n_images = img.dims[0];
    let n_labels = lab.dims[0];
    if n_images != n_labels {
        return Err(DataError::IdxCountMismatch {
            images_file: images_file.to_string(),
            images: n_images,
            labels_file: labels_file.to_string(),
            labels: n_labels,
        });
    }
    if n_images == 0 {
        return Err(DataError::IdxEmpty {
            file: images_file.to_string(),
            dims: img.dims,
            what: "samples",
        });
    }
    if img.dims[1..].contains(&0) {
        return Err(DataError::IdxEmpty {
            file: images_file.to_string(),
            dims: img.dims,
            what: "features",
        });
    }
    // Sizes were checked against the buffer length, so these fit in usize.
    let n = n_images as usize;
    let total = img.data.len() / img.elem;
    let n_features = total / n;

    let mut features = Vec::with_capacity(total);
    for i in 0..total {
        let v = element(&img, i);
        let f = v as f32;
        if !f.is_finite() {
            return Err(DataError::IdxNotFinite {
                file: images_file.to_string(),
                index: i,
                sample: i / n_features,
                feature: i % n_features,
                value: v,
            });
        }
        features.push(f);
    }
    let labels: Vec<u16> = lab.data.iter().map(|&b| u16::from(b)).collect();
    let n_classes = labels.iter().copied().max().map_or(0, usize::from) + 1;
    Ok(Dataset {
        n_features,
        n_classes,
        features,
        labels,
        source: images_file.to_string(),
    })
}

/// Encodes an array as IDX (header plus big-endian data); used by tests and fixtures.
/// `data` holds the elements already in big-endian bytes.
#[cfg(test)]
pub(crate) fn encode(code: u8, dims: &[u32], data: &[u8]) -> Vec<u8> {
    let mut out = vec![0, 0, code, dims.len() as u8];
    for d in dims {
        out.extend_from_slice(&d.to_be_bytes());
    }
    out.extend_from_slice(data);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn labels3() -> Vec<u8> {
        encode(0x08, &[3], &[2, 0, 1])
    }

    #[test]
    fn round_trip_u8_images() {
        // 3 samples of 2 x 2 pixels, written by hand per the format description.
        let images = [
            0x00, 0x00, 0x08, 0x03, // magic: u8, 3 dims
            0x00, 0x00, 0x00, 0x03, // N = 3
            0x00, 0x00, 0x00, 0x02, // rows = 2
            0x00, 0x00, 0x00, 0x02, // cols = 2
            0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 255,
        ];
        let labels = [0x00, 0x00, 0x08, 0x01, 0x00, 0x00, 0x00, 0x03, 2, 0, 1];
        let ds = parse_idx(&images, &labels).unwrap();
        assert_eq!(ds.len(), 3);
        assert_eq!(ds.n_features, 4);
        assert_eq!(ds.n_classes, 3);
        assert_eq!(ds.row(0), &[0.0, 1.0, 2.0, 3.0]);
        assert_eq!(ds.row(2), &[8.0, 9.0, 10.0, 255.0]);
        assert_eq!(ds.labels, vec![2, 0, 1]);
    }

    #[test]
    fn round_trip_every_type_through_files() {
        let values: [f64; 3] = [-2.0, 0.5, 7.0];
        let cases: Vec<(u8, Vec<u8>, [f32; 3])> = vec![
            (0x09, vec![0xFE, 0x00, 0x07], [-2.0, 0.0, 7.0]),
            (
                0x0B,
                [-300i16, 0, 7]
                    .iter()
                    .flat_map(|v| v.to_be_bytes())
                    .collect(),
                [-300.0, 0.0, 7.0],
            ),
            (
                0x0C,
                [-70000i32, 0, 7]
                    .iter()
                    .flat_map(|v| v.to_be_bytes())
                    .collect(),
                [-70000.0, 0.0, 7.0],
            ),
            (
                0x0D,
                values
                    .iter()
                    .flat_map(|&v| (v as f32).to_be_bytes())
                    .collect(),
                [-2.0, 0.5, 7.0],
            ),
            (
                0x0E,
                values.iter().flat_map(|v| v.to_be_bytes()).collect(),
                [-2.0, 0.5, 7.0],
            ),
        ];
        let dir = tempfile::tempdir().unwrap();
        for (code, data, want) in cases {
            let img_path = dir.path().join(format!("img-{code}.idx"));
            let lab_path = dir.path().join(format!("lab-{code}.idx"));
            std::fs::write(&img_path, encode(code, &[3, 1], &data)).unwrap();
            std::fs::write(&lab_path, labels3()).unwrap();
            let ds = load_idx(&img_path, &lab_path).unwrap();
            assert_eq!(ds.features, want, "type 0x{code:02X}");
            assert_eq!(ds.n_features, 1);
        }
        let e = load_idx(&dir.path().join("none"), &dir.path().join("none2"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("none") && e.contains("cannot read"), "{e}");
    }

    fn err(images: &[u8], labels: &[u8]) -> String {
        match parse_idx(images, labels) {
            Ok(ds) => panic!("expected an error, got {ds:?}"),
            Err(e) => e.to_string(),
        }
    }

    #[test]
    fn truncated_and_trailing() {
        let good = encode(0x08, &[3, 2], &[1, 2, 3, 4, 5, 6]);
        let e = err(&good[..good.len() - 1], &labels3());
        assert!(
            e.contains("truncated") && e.contains("needs 18 bytes") && e.contains("has 17"),
            "{e}"
        );
        let e = err(&good[..6], &labels3());
        assert!(e.contains("needs 12 bytes") && e.contains("has 6"), "{e}");
        let e = err(&good[..2], &labels3());
        assert!(e.contains("needs 4 bytes") && e.contains("has 2"), "{e}");
        let mut long = good.clone();
        long.push(9);
        let e = err(&long, &labels3());
        assert!(
            e.contains("1 trailing bytes") && e.contains("3 x 2") && e.contains("give 18"),
            "{e}"
        );
    }

    #[test]
    fn magic_type_and_dims() {
        let e = err(&[0, 1, 8, 1, 0, 0, 0, 0], &labels3());
        assert!(
            e.contains("0x00 0x01") && e.contains("expected 0x00 0x00"),
            "{e}"
        );
        let e = err(&encode(0x0A, &[3], &[0; 3]), &labels3());
        assert!(e.contains("0x0A") && e.contains("0x0E f64"), "{e}");
        let e = err(&encode(0x08, &[], &[]), &labels3());
        assert!(e.contains("dimension count") && e.contains("is 0"), "{e}");
        let huge = encode(0x0E, &[u32::MAX, u32::MAX, u32::MAX], &[]);
        let e = err(&huge, &labels3());
        assert!(
            e.contains("overflow") && e.contains("4294967295 x 4294967295"),
            "{e}"
        );
        let e = err(&encode(0x08, &[3, 0], &[]), &labels3());
        assert!(e.contains("no features") && e.contains("3 x 0"), "{e}");
        let e = err(&encode(0x08, &[0, 4], &[]), &encode(0x08, &[0], &[]));
        assert!(e.contains("no samples"), "{e}");
    }

    #[test]
    fn label_file_checks_and_count_mismatch() {
        let img = encode(0x08, &[3, 1], &[1, 2, 3]);
        let e = err(&img, &encode(0x08, &[4], &[0, 1, 2, 3]));
        assert!(
            e.contains("holds 3 samples") && e.contains("holds 4 labels"),
            "{e}"
        );
        let e = err(&img, &encode(0x0C, &[3], &[0; 12]));
        assert!(
            e.contains("type 0x0C") && e.contains("one-dimensional"),
            "{e}"
        );
        let e = err(&img, &encode(0x08, &[3, 1], &[0; 3]));
        assert!(e.contains("dimensions 3 x 1"), "{e}");
    }

    #[test]
    fn non_finite_floats_rejected() {
        let data: Vec<u8> = [1.0f32, f32::NAN, 2.0]
            .iter()
            .flat_map(|v| v.to_be_bytes())
            .collect();
        let e = err(&encode(0x0D, &[3, 1], &data), &labels3());
        assert!(
            e.contains("element 1 (sample 1, feature 0)") && e.contains("NaN"),
            "{e}"
        );
        let data: Vec<u8> = [1.0f64, 1e300, 2.0]
            .iter()
            .flat_map(|v| v.to_be_bytes())
            .collect();
        let e = err(&encode(0x0E, &[3, 1], &data), &labels3());
        assert!(
            e.contains("element 1") && e.contains("not a finite f32"),
            "{e}"
        );
    }
}
