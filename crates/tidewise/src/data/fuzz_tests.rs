//! Seeded random-input tests: parse_idx and parse_csv must return Ok or Err, never panic,
//! on random, truncated and mutated buffers.

use super::idx::encode;
use super::rng::SplitMix64;
use super::{parse_csv, parse_idx, pump_csv};

fn random_bytes(rng: &mut SplitMix64, max_len: usize) -> Vec<u8> {
    let len = rng.below(max_len + 1);
    (0..len).map(|_| rng.next_u64() as u8).collect()
}

/// A valid IDX pair, then mutated: random byte flips, truncation, or extension.
fn mutated_idx(rng: &mut SplitMix64) -> (Vec<u8>, Vec<u8>) {
    let codes = [0x08u8, 0x09, 0x0B, 0x0C, 0x0D, 0x0E];
    let code = codes[rng.below(codes.len())];
    let elem = match code {
        0x08 | 0x09 => 1,
        0x0B => 2,
        0x0C | 0x0D => 4,
        _ => 8,
    };
    let n = 1 + rng.below(5) as u32;
    let ndim = rng.below(4);
    let mut dims = vec![n];
    for _ in 0..ndim {
        dims.push(1 + rng.below(4) as u32);
    }
    let count: u32 = dims.iter().product();
    let data: Vec<u8> = (0..count as usize * elem)
        .map(|_| rng.next_u64() as u8)
        .collect();
    let mut img = encode(code, &dims, &data);
    let lab_data: Vec<u8> = (0..n).map(|_| rng.below(10) as u8).collect();
    let mut lab = encode(0x08, &[n], &lab_data);
    for buf in [&mut img, &mut lab] {
        match rng.below(4) {
            0 => {
                let cut = rng.below(buf.len() + 1);
                buf.truncate(cut);
            }
            1 => {
                for _ in 0..1 + rng.below(3) {
                    let at = rng.below(buf.len());
                    buf[at] = rng.next_u64() as u8;
                }
            }
            2 => buf.push(rng.next_u64() as u8),
            _ => {}
        }
    }
    (img, lab)
}

#[test]
fn parse_idx_never_panics() {
    let mut rng = SplitMix64::new(0x1D8);
    let (mut ok, mut err) = (0, 0);
    for round in 0..6000 {
        let (img, lab) = if round % 2 == 0 {
            mutated_idx(&mut rng)
        } else {
            let mut img = random_bytes(&mut rng, 64);
            // Often give a plausible start so the deeper checks are reached.
            if img.len() >= 4 && rng.below(2) == 0 {
                img[0] = 0;
                img[1] = 0;
                img[3] %= 4;
            }
            (img, random_bytes(&mut rng, 16))
        };
        match parse_idx(&img, &lab) {
            Ok(ds) => {
                assert_eq!(ds.features.len(), ds.len() * ds.n_features);
                assert!(ds.features.iter().all(|v| v.is_finite()));
                ok += 1;
            }
            Err(e) => {
                assert!(!e.to_string().is_empty());
                err += 1;
            }
        }
    }
    // Both outcomes were exercised.
    assert!(ok > 100 && err > 1000, "ok {ok}, err {err}");
}

#[test]
fn parse_csv_never_panics() {
    let mut rng = SplitMix64::new(0xC5F);
    let base = pump_csv(3, 6);
    let alphabet = b"0123456789.,-+eE\n\r\" abyNnaIif\xc3\xa9";
    let tokens = [
        "0", "1", "2", "65535", "65536", "-1", "0.5", "1e40", "-3e-2", "nan", "inf", "", "abc",
        " 7 ", "\"4\"", "\"x,y\"", "\"\n\"",
    ];
    let (mut ok, mut err) = (0, 0);
    for round in 0..6000 {
        let text = match round % 3 {
            0 => String::from_utf8_lossy(&random_bytes(&mut rng, 80)).into_owned(),
            1 => {
                // Rows of mostly three cells drawn from tokens that hit every cell rule.
                let mut t = String::from("a,b,y\n");
                for _ in 0..rng.below(6) {
                    let cells = if rng.below(8) == 0 {
                        2 + rng.below(3)
                    } else {
                        3
                    };
                    for c in 0..cells {
                        if c > 0 {
                            t.push(',');
                        }
                        let pick = if rng.below(3) == 0 {
                            rng.below(tokens.len())
                        } else {
                            rng.below(3)
                        };
                        t.push_str(tokens[pick]);
                    }
                    t.push_str(if rng.below(4) == 0 { "\r\n" } else { "\n" });
                }
                t
            }
            _ => {
                let mut bytes = base.clone().into_bytes();
                for _ in 0..rng.below(3) {
                    let at = rng.below(bytes.len());
                    bytes[at] = alphabet[rng.below(alphabet.len())];
                }
                if rng.below(2) == 0 {
                    let cut = rng.below(bytes.len() + 1);
                    bytes.truncate(cut);
                }
                String::from_utf8_lossy(&bytes).into_owned()
            }
        };
        let label = if round % 3 == 2 { "state" } else { "y" };
        match parse_csv(&text, label, "fuzz") {
            Ok(ds) => {
                assert_eq!(ds.features.len(), ds.len() * ds.n_features);
                assert!(ds.features.iter().all(|v| v.is_finite()));
                assert!(ds.labels.iter().all(|&l| usize::from(l) < ds.n_classes));
                ok += 1;
            }
            Err(e) => {
                assert!(!e.to_string().is_empty());
                err += 1;
            }
        }
    }
    assert!(ok > 100 && err > 1000, "ok {ok}, err {err}");
}
