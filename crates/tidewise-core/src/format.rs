//! Signed two's-complement fixed-point formats chosen at run time.
//!
//! A [`Format`] is a word length (2 to 32 bits), a count of fraction bits (0 to
//! [`MAX_FRAC`]) and an overflow policy. The value of a raw word `r` is `r · 2^-frac`.
//! The fraction may exceed the bits above the sign (`frac > word - 1`): such a format's
//! whole range lies below 1, which suits small learned weights.
//!
//! # Notation
//! * **Q notation** `Qm.n`: `m` integer bits *excluding* the sign, `n` fraction bits, so
//!   the word is `m + n + 1` bits (`Q3.12` is 16 bits, range [-8, 8 - 2^-12]). `Qn` alone
//!   means `Q0.n`. `m` may be negative for formats whose range lies below 1/2
//!   (`Q-2.9` is an 8-bit word with 9 fraction bits, range [-0.25, 0.25 - 2^-9]).
//! * **Presets** named after the fixed-point types of ISO/IEC TR 18037 (see [`Format::preset`]).
//!
//! Every word length and fraction count has a Q name (`m = word - 1 - frac`), so these two
//! forms are the whole notation. Either may carry the overflow policy after a colon:
//! `Q3.12:wrap` or `short_fract:sat` (saturation is the default).

use core::fmt;

/// Largest word length a format may have.
pub const MAX_WORD: u8 = 32;
/// Smallest word length a format may have (a sign bit and one more).
pub const MIN_WORD: u8 = 2;
/// Largest fraction-bit count; keeps every product's shift inside a 128-bit intermediate.
pub const MAX_FRAC: u8 = 40;

/// What happens to a value outside the format's range.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
pub enum Overflow {
    /// Clamp to the nearest representable value (and count a saturation event).
    Saturate,
    /// Keep the low `word` bits, as a plain adder does (and count the event too).
    Wrap,
}

/// A signed fixed-point format: `word` bits, of which `frac` are below the binary point.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
pub struct Format {
    word: u8,
    frac: u8,
    overflow: Overflow,
}

/// Why a format could not be made or parsed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FormatError {
    /// The word length is outside [`MIN_WORD`]..=[`MAX_WORD`].
    Word(i32),
    /// The fraction count is outside 0..=[`MAX_FRAC`].
    Frac(i32),
    /// The text is neither Q notation nor a preset name.
    Syntax,
    /// The text after the colon is not `sat`/`saturate` or `wrap`.
    Overflow,
}

impl fmt::Display for FormatError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            FormatError::Word(w) => write!(
                f,
                "word length {w} bits is outside the allowed {MIN_WORD} to {MAX_WORD} bits"
            ),
            FormatError::Frac(n) => {
                write!(f, "fraction bits {n} outside the allowed 0 to {MAX_FRAC}")
            }
            FormatError::Syntax => f.write_str(
                "expected Q notation Qm.n (m integer bits excluding the sign, may be negative; \
                 n fraction bits; e.g. Q3.12, Q15, Q-2.9) or a TR 18037 preset (short_fract, \
                 fract, long_fract, short_accum, accum, long_accum), optionally followed by \
                 :sat or :wrap",
            ),
            FormatError::Overflow => {
                f.write_str("overflow policy after ':' must be `sat`, `saturate` or `wrap`")
            }
        }
    }
}

/// The fixed-point types of ISO/IEC TR 18037:2008 (Embedded C), with the bit counts of the
/// common compiler layout (GCC avr, Microchip XC32; `docs/references.md` \[9\], \[13\], \[14\]):
/// `(name, word bits, fraction bits)`. The common `long _Accum` (s32.31) needs 64 bits, more
/// than [`MAX_WORD`]; its preset is s8.23, which keeps the clause 7.18a.3 minimums
/// (IBIT >= 4, FBIT >= 23) in a 32-bit word.
pub const TR18037_PRESETS: [(&str, u8, u8); 6] = [
    ("short_fract", 8, 7),
    ("fract", 16, 15),
    ("long_fract", 32, 31),
    ("short_accum", 16, 7),
    ("accum", 32, 15),
    ("long_accum", 32, 23),
];

impl Format {
    /// A saturating format of `word` bits with `frac` fraction bits.
    pub const fn new(word: u8, frac: u8) -> Result<Format, FormatError> {
        Self::with_overflow(word, frac, Overflow::Saturate)
    }

    /// A format with an explicit overflow policy.
    pub const fn with_overflow(
        word: u8,
        frac: u8,
        overflow: Overflow,
    ) -> Result<Format, FormatError> {
        if word < MIN_WORD || word > MAX_WORD {
            return Err(FormatError::Word(word as i32));
        }
        if frac > MAX_FRAC {
            return Err(FormatError::Frac(frac as i32));
        }
        Ok(Format {
            word,
            frac,
            overflow,
        })
    }

    /// Q notation `Qm.n`: `m` integer bits excluding the sign (may be negative), `n` fraction bits.
    pub fn q(m: i32, n: i32) -> Result<Format, FormatError> {
        if !(0..=MAX_FRAC as i32).contains(&n) {
            return Err(FormatError::Frac(n));
        }
        let word = m.saturating_add(n).saturating_add(1);
        if !(MIN_WORD as i32..=MAX_WORD as i32).contains(&word) {
            return Err(FormatError::Word(word));
        }
        Format::new(word as u8, n as u8)
    }

    /// The preset of ISO/IEC TR 18037 with this name (see [`TR18037_PRESETS`]).
    pub fn preset(name: &str) -> Option<Format> {
        TR18037_PRESETS
            .iter()
            .find(|(n, _, _)| *n == name)
            .and_then(|&(_, w, f)| Format::new(w, f).ok())
    }

    /// The same format with another overflow policy.
    pub const fn overflowing(self, overflow: Overflow) -> Format {
        Format { overflow, ..self }
    }

    /// Word length in bits, sign included.
    pub const fn word(self) -> u8 {
        self.word
    }
    /// Fraction bits.
    pub const fn frac(self) -> u8 {
        self.frac
    }
    /// Integer bits excluding the sign (`m` of `Qm.n`); negative when the range lies below 1/2.
    pub const fn int_bits(self) -> i32 {
        self.word as i32 - 1 - self.frac as i32
    }
    /// The overflow policy.
    pub const fn overflow(self) -> Overflow {
        self.overflow
    }
    /// Smallest raw word, −2^(word−1).
    ///
    /// Formed by a 32-bit arithmetic shift (words have at most 32 bits): one instruction on a
    /// 32-bit core, where a 64-bit shift is a library call on the Cortex-M0.
    pub const fn raw_min(self) -> i64 {
        i32::MIN.wrapping_shr(32u32.wrapping_sub(self.word as u32)) as i64
    }
    /// Largest raw word, 2^(word−1) − 1.
    pub const fn raw_max(self) -> i64 {
        i32::MAX.wrapping_shr(32u32.wrapping_sub(self.word as u32)) as i64
    }
    /// Bytes of the smallest container holding the word: 1, 2 or 4.
    pub const fn container_bytes(self) -> usize {
        container_bytes(self.word)
    }
    /// The resolution 2^-frac as `f64` (exact).
    pub fn lsb(self) -> f64 {
        pow2(-(self.frac as i32))
    }
    /// Smallest value as `f64` (exact).
    pub fn min_value(self) -> f64 {
        self.raw_min() as f64 * self.lsb()
    }
    /// Largest value as `f64` (exact).
    pub fn max_value(self) -> f64 {
        self.raw_max() as f64 * self.lsb()
    }

    /// Parses Q notation or a preset, optionally followed by `:sat`/`:wrap`.
    pub fn parse(text: &str) -> Result<Format, FormatError> {
        let text = text.trim();
        let (body, overflow) = match text.split_once(':') {
            Some((b, o)) => (b.trim(), parse_overflow(o.trim())?),
            None => (text, Overflow::Saturate),
        };
        let format = if let Some(f) = Format::preset(body) {
            f
        } else if let Some(rest) = body.strip_prefix(['Q', 'q']) {
            match rest.split_once('.') {
                Some((m, n)) => Format::q(parse_int(m)?, parse_int(n)?)?,
                None => Format::q(0, parse_int(rest)?)?,
            }
        } else {
            return Err(FormatError::Syntax);
        };
        Ok(format.overflowing(overflow))
    }
}

fn parse_overflow(text: &str) -> Result<Overflow, FormatError> {
    match text {
        "sat" | "saturate" => Ok(Overflow::Saturate),
        "wrap" => Ok(Overflow::Wrap),
        _ => Err(FormatError::Overflow),
    }
}

fn parse_int(text: &str) -> Result<i32, FormatError> {
    let (neg, digits) = match text.strip_prefix('-') {
        Some(d) => (true, d),
        None => (false, text),
    };
    if digits.is_empty() || digits.len() > 4 || !digits.bytes().all(|b| b.is_ascii_digit()) {
        return Err(FormatError::Syntax);
    }
    let v = digits
        .bytes()
        .fold(0i32, |acc, b| acc * 10 + i32::from(b - b'0'));
    Ok(if neg { -v } else { v })
}

/// Bytes of the smallest of 8-, 16- or 32-bit containers that holds `word` bits.
pub const fn container_bytes(word: u8) -> usize {
    if word <= 8 {
        1
    } else if word <= 16 {
        2
    } else {
        4
    }
}

/// 2^e as `f64`, exact for the exponents formats use.
pub fn pow2(e: i32) -> f64 {
    f64::from_bits(((1023 + e.clamp(-1022, 1023)) as u64) << 52)
}

impl fmt::Display for Format {
    /// Q notation, `:wrap` appended when wrapping.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "Q{}.{}", self.int_bits(), self.frac)?;
        if self.overflow == Overflow::Wrap {
            f.write_str(":wrap")?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn q_notation_counts_the_sign_outside_m() {
        let f = Format::parse("Q3.12").unwrap();
        assert_eq!((f.word(), f.frac(), f.int_bits()), (16, 12, 3));
        assert_eq!(Format::parse("Q15").unwrap(), Format::new(16, 15).unwrap());
        assert_eq!(
            Format::parse("Q3.12:wrap").unwrap(),
            f.overflowing(Overflow::Wrap)
        );
        let small = Format::parse("Q-2.9").unwrap();
        assert_eq!((small.word(), small.max_value()), (8, 0.25 - 1.0 / 512.0));
    }

    #[test]
    fn bad_formats_name_the_value() {
        assert_eq!(Format::parse("Q40.3"), Err(FormatError::Word(44)));
        assert_eq!(Format::parse("Q3.-1"), Err(FormatError::Frac(-1)));
        assert_eq!(Format::parse("Q-1.1"), Err(FormatError::Word(1)));
        // Word-and-fraction strings are not part of the notation.
        assert_eq!(Format::parse("s16f12"), Err(FormatError::Syntax));
        assert_eq!(Format::parse("Q0.0"), Err(FormatError::Word(1)));
        assert_eq!(Format::parse("Q3.12:clip"), Err(FormatError::Overflow));
        assert_eq!(Format::parse("Qx"), Err(FormatError::Syntax));
        assert_eq!(Format::parse("Q99999.1"), Err(FormatError::Syntax));
        let msg = alloc_free_message(FormatError::Word(44));
        assert!(msg.starts_with("word length 44 bits"));
    }

    #[test]
    fn raw_bounds_are_those_of_a_twos_complement_word() {
        // Fact of the trade: a w-bit two's-complement word holds −2^(w−1) to 2^(w−1) − 1.
        for w in MIN_WORD..=MAX_WORD {
            let f = Format::new(w, 0).unwrap();
            let half = 1i128 << (w - 1);
            assert_eq!(i128::from(f.raw_min()), -half, "{w} bits");
            assert_eq!(i128::from(f.raw_max()), half - 1, "{w} bits");
        }
    }

    fn alloc_free_message(e: FormatError) -> heapless::String<200> {
        use core::fmt::Write;
        let mut s = heapless::String::new();
        let _ = write!(s, "{e}");
        s
    }

    #[test]
    fn display_round_trips() {
        for text in ["Q3.12", "Q0.15", "Q-2.9", "Q7.0:wrap", "Q31.0"] {
            let f = Format::parse(text).unwrap();
            let mut s: heapless::String<32> = heapless::String::new();
            core::fmt::Write::write_fmt(&mut s, format_args!("{f}")).unwrap();
            assert_eq!(s.as_str(), text);
        }
    }
}
