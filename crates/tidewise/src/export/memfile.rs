//! Memory files as `$readmemh` reads them (IEEE 1364-2005, 17.2.9; `docs/references.md`
//! \[39\]): one hexadecimal word
//! per line, `//` comments allowed. A word of `width` bits is written as its two's-complement
//! bit pattern in `width.div_ceil(4)` digits; reading sign-extends it again.

use anyhow::{bail, Result};

/// Hex digits of a word of `width` bits.
pub fn digits(width: u32) -> usize {
    width.div_ceil(4) as usize
}

/// The two's-complement bit pattern of `v` in `width` bits (1 to 64).
pub fn pattern(v: i64, width: u32) -> u64 {
    if width >= 64 {
        v as u64
    } else {
        (v as u64) & ((1u64 << width) - 1)
    }
}

/// A memory file of `words`, each `width` bits, under a comment line.
pub fn write(words: &[i64], width: u32, comment: &str) -> String {
    let d = digits(width);
    let mut s = String::with_capacity(words.len() * (d + 1) + comment.len() + 8);
    for line in comment.lines() {
        s.push_str("// ");
        s.push_str(line);
        s.push('\n');
    }
    for &w in words {
        s.push_str(&format!("{:0d$x}\n", pattern(w, width)));
    }
    s
}

/// The words of a memory file, sign-extended from `width` bits; `what` names the file in
/// errors. Accepts what [`write()`] writes: comments, blank lines, one word per line.
pub fn read(text: &str, width: u32, what: &str) -> Result<Vec<i64>> {
    let mut out = Vec::new();
    for (i, raw) in text.lines().enumerate() {
        let line = raw.split("//").next().unwrap_or("").trim();
        if line.is_empty() {
            continue;
        }
        let v = match u64::from_str_radix(line, 16) {
            Ok(v) if line.len() <= digits(width) => v,
            _ => bail!(
                "{what} line {}: {line:?} is not a {width}-bit hexadecimal word ({} digits at most)",
                i + 1,
                digits(width)
            ),
        };
        if width < 64 && v >> width != 0 {
            bail!(
                "{what} line {}: {line:?} does not fit in {width} bits",
                i + 1
            );
        }
        let s = 64 - width.min(64);
        out.push(((v << s) as i64) >> s);
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn two_complement_round_trip() {
        // Two's-complement patterns of -1 and -128 in 8 bits are ff and 80 (fact of the trade).
        let text = write(&[-1, -128, 127, 0, 5], 8, "t");
        assert_eq!(text, "// t\nff\n80\n7f\n00\n05\n");
        assert_eq!(read(&text, 8, "t").unwrap(), vec![-1, -128, 127, 0, 5]);
        let wide = write(&[i64::MIN, -2], 64, "w");
        assert_eq!(read(&wide, 64, "w").unwrap(), vec![i64::MIN, -2]);
        // A 6-bit word takes two digits; 0x3f is -1.
        assert_eq!(read("3f\n", 6, "x").unwrap(), vec![-1]);
        assert!(read("40\n", 6, "x").is_err());
        assert!(read("zz\n", 8, "x").is_err());
    }
}
