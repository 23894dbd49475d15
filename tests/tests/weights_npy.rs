//! Weight files against their published descriptions and an independent writer.
//!
//! * The files `tidewise train` writes are checked byte by byte: the zip container against
//!   "APPNOTE.TXT - .ZIP File Format Specification" (PKWARE, version 6.3.x: local file header
//!   4.3.7, central directory header 4.3.12, end of central directory record 4.3.16; offsets
//!   recalled from memory and confirmed by parsing the numpy-written fixture with the same
//!   code; docs/references.md [42]), each member's CRC-32 against the `crc32fast` crate
//!   (docs/references.md [36]), and each member against "A Simple File Format for NumPy
//!   Arrays" (NumPy Enhancement Proposal 1, 2007; docs/references.md [35]) and the NumPy
//!   reference for `numpy.lib.format`: magic `\x93NUMPY`, version 1.0, a little-endian
//!   `u16` header length, an ASCII Python dict literal with the keys `descr`, `fortran_order`
//!   and `shape`, padded with spaces and ended by `\n` so that the data start at a multiple of
//!   64 bytes (the reference's alignment; NEP 1 asked for 16), then the values in C order.
//!   The array-protocol type strings (`<f4`, `<i2`, `|i1`) are NumPy's ("The array
//!   interface protocol", NumPy reference; docs/references.md [35]). The headers are also compared with those numpy
//!   itself wrote for the same shapes (`fixtures/weights/numpy-savez.npz`): same length and
//!   the same dict up to numpy's optional trailing comma.
//! * The files' values are the trained network's: their FNV-1a digest in parameter order
//!   equals the digest `outcome.json` reports (FNV-1a 64-bit, offset basis
//!   0xcbf29ce484222325, prime 0x100000001b3: "The FNV Non-Cryptographic Hash Algorithm",
//!   IETF Internet-Draft, 2019, year recalled from memory; docs/references.md [30]), and
//!   decoded values are raw · 2^-frac_bits.
//! * Files numpy wrote (`fixtures/weights/make_fixtures.py`: float32 with `numpy.savez`;
//!   float64, Fortran order, big-endian and deflated with `numpy.savez_compressed`) load with
//!   the values the script defines.

use std::path::{Path, PathBuf};

use serde_json::Value;
use tidewise::weights::{npz, InitFile};

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/weights")
        .join(name)
}

fn u16le(b: &[u8], at: usize) -> usize {
    usize::from(u16::from_le_bytes([b[at], b[at + 1]]))
}
fn u32le(b: &[u8], at: usize) -> u32 {
    u32::from_le_bytes([b[at], b[at + 1], b[at + 2], b[at + 3]])
}

/// One stored member of a zip archive.
struct Member {
    name: String,
    data: Vec<u8>,
}

/// Members of a zip archive, through the central directory (APPNOTE 4.3.12, 4.3.16), each
/// checked against its local file header (4.3.7) and its CRC-32.
fn members(zip: &[u8]) -> Vec<Member> {
    // End of central directory record: signature 0x06054b50, 22 bytes without comment.
    let eocd = (0..=zip.len() - 22)
        .rev()
        .find(|&i| u32le(zip, i) == 0x0605_4b50)
        .expect("end of central directory record");
    assert_eq!(u16le(zip, eocd + 20), 0, "no archive comment");
    assert_eq!(eocd + 22, zip.len(), "the record ends the file");
    let entries = u16le(zip, eocd + 10);
    assert_eq!(u16le(zip, eocd + 8), entries, "one disk");
    let cd_size = u32le(zip, eocd + 12) as usize;
    let mut at = u32le(zip, eocd + 16) as usize;
    assert_eq!(
        at + cd_size,
        eocd,
        "the central directory ends at the record"
    );
    let mut out = Vec::new();
    for _ in 0..entries {
        assert_eq!(
            u32le(zip, at),
            0x0201_4b50,
            "central directory header signature"
        );
        let method = u16le(zip, at + 10);
        let crc = u32le(zip, at + 16);
        let csize = u32le(zip, at + 20) as usize;
        let usize_ = u32le(zip, at + 24) as usize;
        let (nlen, elen, clen) = (
            u16le(zip, at + 28),
            u16le(zip, at + 30),
            u16le(zip, at + 32),
        );
        let local = u32le(zip, at + 42) as usize;
        let name = String::from_utf8(zip[at + 46..at + 46 + nlen].to_vec()).unwrap();
        at += 46 + nlen + elen + clen;
        // Local file header: signature 0x04034b50, same method and name, data after the
        // 30 fixed bytes, the name and the extra field.
        assert_eq!(
            u32le(zip, local),
            0x0403_4b50,
            "{name}: local header signature"
        );
        assert_eq!(u16le(zip, local + 8), method, "{name}: method");
        let (lnlen, lelen) = (u16le(zip, local + 26), u16le(zip, local + 28));
        assert_eq!(&zip[local + 30..local + 30 + lnlen], name.as_bytes());
        let start = local + 30 + lnlen + lelen;
        assert_eq!(method, 0, "{name}: stored, as numpy.savez writes");
        assert_eq!(csize, usize_, "{name}: stored sizes agree");
        let data = zip[start..start + csize].to_vec();
        assert_eq!(crc32fast::hash(&data), crc, "{name}: CRC-32");
        out.push(Member { name, data });
    }
    out
}

/// The NPY header of `bytes` (NEP 1; `numpy.lib.format`): its dict text and the data offset.
fn npy_header(bytes: &[u8]) -> (String, usize) {
    assert_eq!(&bytes[..6], b"\x93NUMPY", "magic");
    assert_eq!((bytes[6], bytes[7]), (1, 0), "format version 1.0");
    let total = 10 + u16le(bytes, 8);
    assert_eq!(total % 64, 0, "data aligned to 64 bytes");
    let text = std::str::from_utf8(&bytes[10..total]).expect("ASCII header");
    assert!(text.is_ascii());
    assert!(text.ends_with('\n'), "header ends with a newline");
    let dict = text.trim_end_matches('\n').trim_end_matches(' ');
    assert!(dict.starts_with('{') && dict.ends_with('}'), "{dict:?}");
    (dict.to_string(), total)
}

/// The Python literal of a shape: `(5, 16)`, `(4,)`.
fn shape_literal(shape: &[usize]) -> String {
    match shape {
        [n] => format!("({n},)"),
        _ => format!(
            "({})",
            shape
                .iter()
                .map(|n| n.to_string())
                .collect::<Vec<_>>()
                .join(", ")
        ),
    }
}

/// Checks one member's header and returns its data bytes.
fn check_npy<'a>(m: &'a Member, descr: &str, shape: &[usize], item: usize) -> &'a [u8] {
    let (dict, start) = npy_header(&m.data);
    for key in [
        format!("'descr': '{descr}'"),
        "'fortran_order': False".to_string(),
        format!("'shape': {}", shape_literal(shape)),
    ] {
        assert!(dict.contains(&key), "{}: {key} in {dict}", m.name);
    }
    let data = &m.data[start..];
    assert_eq!(
        data.len(),
        shape.iter().product::<usize>() * item,
        "{}",
        m.name
    );
    data
}

fn fnv1a64(h: &mut u64, bytes: &[u8]) {
    for &b in bytes {
        *h ^= u64::from(b);
        *h = h.wrapping_mul(0x0000_0100_0000_01b3);
    }
}

const SPEC: &str = "[data]\nsource = \"pump\"\nsamples = 200\n[net]\nhidden = [5]\n\
                    [rule]\nwarmup_epochs = 1\n[run]\nepochs = 3\n";

/// `tidewise train` on the pump data (16-5-4, dtp-direct) into `dir`.
fn train(dir: &Path, sets: &[&str]) -> Value {
    let spec = dir.join("pump.toml");
    std::fs::write(&spec, SPEC).unwrap();
    let out = dir.join("out");
    tidewise::cmd::train::main(tidewise::cmd::train::Args {
        spec,
        out: Some(out.clone()),
        with: sets.iter().map(|s| s.to_string()).collect(),
        json: true,
        force: false,
    })
    .unwrap();
    serde_json::from_slice(&std::fs::read(out.join("outcome.json")).unwrap()).unwrap()
}

/// Tensor names in parameter order, with shapes, as `weights.json` lists them.
fn tensors(index: &Value) -> Vec<(String, Vec<usize>, u32)> {
    index["tensors"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| {
            let shape = t["shape"]
                .as_array()
                .unwrap()
                .iter()
                .map(|n| n.as_u64().unwrap() as usize)
                .collect();
            (
                t["name"].as_str().unwrap().to_string(),
                shape,
                t["frac_bits"].as_u64().unwrap() as u32,
            )
        })
        .collect()
}

fn by_name<'a>(ms: &'a [Member], name: &str) -> &'a Member {
    ms.iter()
        .find(|m| m.name == format!("{name}.npy"))
        .unwrap_or_else(|| panic!("no member {name}.npy"))
}

fn written_files_follow_the_formats(sets: &[&str], raw_descr: &str, raw_bytes: usize) {
    let dir = tempfile::tempdir().unwrap();
    let summary = train(dir.path(), sets);
    let out = dir.path().join("out");
    let index: Value =
        serde_json::from_slice(&std::fs::read(out.join("weights.json")).unwrap()).unwrap();
    let list = tensors(&index);
    let names: Vec<&str> = list.iter().map(|t| t.0.as_str()).collect();
    assert_eq!(
        names,
        [
            "layer1.forward_weights",
            "layer2.forward_weights",
            "layer1.biases",
            "layer2.biases",
            "layer1.feedback_weights"
        ]
    );
    assert_eq!(index["raw_dtype"], format!("int{}", 8 * raw_bytes));
    let numpy = members(&std::fs::read(fixture("numpy-savez.npz")).unwrap());
    let float = members(&std::fs::read(out.join("weights-float.npz")).unwrap());
    let fixed = members(&std::fs::read(out.join("weights-fixed.npz")).unwrap());
    let raw = members(&std::fs::read(out.join("weights-fixed-raw.npz")).unwrap());
    for ms in [&float, &fixed, &raw] {
        let got: Vec<&str> = ms.iter().map(|m| m.name.as_str()).collect();
        let want: Vec<String> = names.iter().map(|n| format!("{n}.npy")).collect();
        assert_eq!(got, want);
    }
    let (mut h_float, mut h_fixed) = (0xcbf2_9ce4_8422_2325u64, 0xcbf2_9ce4_8422_2325u64);
    for (name, shape, frac) in &list {
        // float32 members: the very header numpy writes for this shape.
        let f = check_npy(by_name(&float, name), "<f4", shape, 4);
        // The same header as numpy's for this shape: length, and the same dict literal (numpy
        // writes a trailing ", " before the closing brace, which the literal allows).
        let (ours, n) = npy_header(&by_name(&float, name).data);
        let (theirs, m) = npy_header(&by_name(&numpy, name).data);
        let canonical = |d: &str| d.replace(' ', "").replace(",}", "}");
        assert_eq!(
            (canonical(&ours), n),
            (canonical(&theirs), m),
            "{name}: header as numpy's"
        );
        for v in f.chunks_exact(4) {
            fnv1a64(&mut h_float, v);
        }
        let d = check_npy(by_name(&fixed, name), "<f4", shape, 4);
        let r = check_npy(by_name(&raw, name), raw_descr, shape, raw_bytes);
        for (dv, rv) in d.chunks_exact(4).zip(r.chunks_exact(raw_bytes)) {
            let word: i32 = match *rv {
                [a] => i32::from(a as i8),
                [a, b] => i32::from(i16::from_le_bytes([a, b])),
                [a, b, c, e] => i32::from_le_bytes([a, b, c, e]),
                _ => unreachable!(),
            };
            // The core's digest: each word sign-extended to 4 little-endian bytes.
            fnv1a64(&mut h_fixed, &word.to_le_bytes());
            let value = f32::from_le_bytes(dv.try_into().unwrap());
            assert_eq!(
                f64::from(value),
                f64::from(word) * 2f64.powi(-(*frac as i32)),
                "{name}"
            );
        }
    }
    assert_eq!(
        format!("{h_float:016x}"),
        summary["arms"]["float"]["digest"]
    );
    assert_eq!(
        format!("{h_fixed:016x}"),
        summary["arms"]["fixed"]["digest"]
    );
    // Read back through the loader: the same values.
    let back = InitFile::read(&out.join("weights-float.npz")).unwrap();
    for a in &back.arrays {
        let f = check_npy(by_name(&float, &a.name), "<f4", &a.shape, 4);
        let want: Vec<f32> = f
            .chunks_exact(4)
            .map(|v| f32::from_le_bytes(v.try_into().unwrap()))
            .collect();
        assert_eq!(a.values, want, "{}", a.name);
        assert_eq!(a.dtype, "float32");
    }
}

#[test]
fn sixteen_bit_files_follow_npy_and_zip() {
    written_files_follow_the_formats(&[], "<i2", 2);
}

#[test]
fn eight_bit_files_follow_npy_and_zip() {
    written_files_follow_the_formats(
        &[
            "fixed.forward_weights=Q1.6",
            "fixed.biases=Q2.5",
            "fixed.feedback_weights=Q1.6",
            "fixed.activations=Q2.5",
            "fixed.noise=Q2.5",
            "fixed.rate=Q0.7",
        ],
        "|i1",
        1,
    );
}

/// `make_fixtures.py`'s values: ((37 i + 11 t) mod 29 − 14) / 64.
fn script_values(t: usize, n: usize) -> Vec<f32> {
    (0..n)
        .map(|i| (((37 * i + 11 * t) % 29) as f32 - 14.0) / 64.0)
        .collect()
}

#[test]
fn numpy_written_files_load() {
    let shapes = [
        ("layer1.forward_weights", vec![5, 16]),
        ("layer2.forward_weights", vec![4, 5]),
        ("layer1.biases", vec![5]),
        ("layer2.biases", vec![4]),
        ("layer1.feedback_weights", vec![5, 4]),
    ];
    let plain = InitFile::read(&fixture("numpy-savez.npz")).unwrap();
    let mixed = InitFile::read(&fixture("numpy-mixed.npz")).unwrap();
    assert_eq!(plain.arrays.len(), 5);
    assert_eq!(mixed.arrays.len(), 4);
    for (t, (name, shape)) in shapes.iter().enumerate() {
        let n = shape.iter().product();
        for file in [&plain, &mixed] {
            let Some(a) = file.arrays.iter().find(|a| a.name == *name) else {
                assert_eq!(*name, "layer1.feedback_weights");
                continue;
            };
            assert_eq!(&a.shape, shape, "{name}");
            assert_eq!(a.values, script_values(t, n), "{name}");
        }
    }
    // float64 (converted), Fortran order (back in row-major order), big-endian, deflated.
    let dtype = |n: &str| mixed.arrays.iter().find(|a| a.name == n).unwrap().dtype;
    assert_eq!(dtype("layer1.forward_weights"), "float64");
    assert_eq!(dtype("layer2.forward_weights"), "float32");
    // The numpy file starts a run; its values are what both arms start from.
    let dir = tempfile::tempdir().unwrap();
    for file in ["numpy-savez.npz", "numpy-mixed.npz"] {
        let init = format!("net.init={}", fixture(file).display());
        let sub = dir.path().join(file);
        std::fs::create_dir_all(&sub).unwrap();
        let s = train(&sub, &[&init]);
        let loaded: Vec<&str> = s["init"]["tensors"]
            .as_array()
            .unwrap()
            .iter()
            .map(|t| t["name"].as_str().unwrap())
            .collect();
        assert_eq!(loaded.len(), if file == "numpy-savez.npz" { 5 } else { 4 });
        assert_eq!(s["arms"]["fixed"]["init_saturations"], 0);
    }
    // The same values through the library's reader of raw bytes.
    let bytes = std::fs::read(fixture("numpy-savez.npz")).unwrap();
    assert_eq!(
        npz::read_bytes(Path::new("numpy-savez.npz"), &bytes).unwrap(),
        plain.arrays
    );
}
