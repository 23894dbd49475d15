//! The one error type of the data sources. Every message names where the problem is (file,
//! line and column for CSV; file and byte offset or dimension for IDX) and what was expected.

use std::fmt;

/// Why a data set could not be loaded, split or scaled.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum DataError {
    /// The file could not be read.
    #[error("{path}: cannot read the file: {err}")]
    Io {
        path: String,
        #[source]
        err: std::io::Error,
    },
    /// A CSV file is not valid UTF-8.
    #[error("{origin}: line {line}: the text is not valid UTF-8 (first bad byte at offset {byte}); save the file as UTF-8")]
    NotUtf8 {
        origin: String,
        line: u64,
        byte: usize,
    },
    /// A CSV file with no header row.
    #[error("{origin}: the file is empty; line 1 must be a header row naming the columns")]
    EmptyFile { origin: String },
    /// A CSV file with a header but no data rows.
    #[error("{origin}: no data rows after the header on line 1; at least one row is required")]
    NoDataRows { origin: String },
    /// The named label column is not in the header.
    #[error(
        "{origin}: line 1: no column named \"{wanted}\" holds the labels; columns available: {}",
        Quoted(available)
    )]
    MissingLabelColumn {
        origin: String,
        wanted: String,
        available: Vec<String>,
    },
    /// The label column name appears more than once in the header.
    #[error("{origin}: line 1: the label column \"{wanted}\" appears twice, at columns {first} and {second}; column names must be unique")]
    DuplicateLabelColumn {
        origin: String,
        wanted: String,
        first: usize,
        second: usize,
    },
    /// The header has the label column and nothing else.
    #[error("{origin}: line 1: the only column is the label column \"{label}\"; at least one feature column is required")]
    NoFeatureColumns { origin: String, label: String },
    /// A row with a different number of fields than the header.
    #[error("{origin}: line {line}: expected {expected} fields (as in the header on line 1), found {found}")]
    RaggedRow {
        origin: String,
        line: u64,
        expected: usize,
        found: usize,
    },
    /// A feature cell that is not a number.
    #[error("{origin}: line {line}, column {column} (\"{header}\"): {} is not a number; feature cells must be decimal numbers such as 0.25 or -3e-2", Cell(value))]
    NotANumber {
        origin: String,
        line: u64,
        column: usize,
        header: String,
        value: String,
    },
    /// A feature cell that is NaN, infinite, or too large for f32.
    #[error("{origin}: line {line}, column {column} (\"{header}\"): {} is not finite in f32; allowed are finite values with magnitude up to 3.4028235e38", Cell(value))]
    NotFinite {
        origin: String,
        line: u64,
        column: usize,
        header: String,
        value: String,
    },
    /// A label cell that cannot be a class index.
    #[error(
        "{origin}: line {line}, column {column} (\"{header}\"): label {} {reason}",
        Cell(value)
    )]
    BadLabel {
        origin: String,
        line: u64,
        column: usize,
        header: String,
        value: String,
        reason: &'static str,
    },
    /// More distinct string labels than class indices fit in `u16`.
    #[error("{origin}: {found} distinct labels; at most 65536 classes are supported")]
    TooManyClasses { origin: String, found: usize },

    /// An IDX file shorter than its header or its dimensions require.
    #[error("{file}: truncated IDX file: {what} needs {needed} bytes, the file has {found}")]
    IdxTruncated {
        file: String,
        what: &'static str,
        needed: u64,
        found: usize,
    },
    /// An IDX file longer than its dimensions say.
    #[error("{file}: {extra} trailing bytes after the IDX data: the dimensions {} give {expected} bytes in all, the file has {found}", Dims(dims))]
    IdxTrailing {
        file: String,
        dims: Vec<u32>,
        expected: u64,
        found: usize,
        extra: u64,
    },
    /// The first two bytes of an IDX file are not zero.
    #[error("{file}: bad IDX magic: bytes 0-1 are 0x{:02X} 0x{:02X}, expected 0x00 0x00", found[0], found[1])]
    IdxMagic { file: String, found: [u8; 2] },
    /// An IDX type code this reader does not know.
    #[error("{file}: IDX type code 0x{code:02X} (byte 2) is not supported; expected 0x08 u8, 0x09 i8, 0x0B i16, 0x0C i32, 0x0D f32 or 0x0E f64")]
    IdxType { file: String, code: u8 },
    /// An IDX file with zero dimensions.
    #[error(
        "{file}: the IDX dimension count (byte 3) is 0; expected at least 1 (the sample count)"
    )]
    IdxNoDims { file: String },
    /// The product of the IDX dimensions does not fit in memory sizes.
    #[error(
        "{file}: the IDX dimensions {} overflow: their product times the element size exceeds {}",
        Dims(dims),
        u64::MAX
    )]
    IdxOverflow { file: String, dims: Vec<u32> },
    /// A zero dimension (no samples or no features).
    #[error(
        "{file}: the IDX dimensions {} hold no {what}; every dimension must be at least 1",
        Dims(dims)
    )]
    IdxEmpty {
        file: String,
        dims: Vec<u32>,
        what: &'static str,
    },
    /// A label file that is not one-dimensional u8.
    #[error("{file}: an IDX label file must be one-dimensional (N) of type 0x08 (u8); found type 0x{code:02X} with dimensions {}", Dims(dims))]
    IdxLabelShape {
        file: String,
        code: u8,
        dims: Vec<u32>,
    },
    /// Image and label files disagree on the sample count.
    #[error("IDX sample counts differ: {images_file} holds {images} samples, {labels_file} holds {labels} labels; they must be equal")]
    IdxCountMismatch {
        images_file: String,
        images: u32,
        labels_file: String,
        labels: u32,
    },
    /// A float element in an IDX image file that is NaN or infinite (or beyond f32).
    #[error(
        "{file}: element {index} (sample {sample}, feature {feature}) is {value}, not a finite f32"
    )]
    IdxNotFinite {
        file: String,
        index: usize,
        sample: usize,
        feature: usize,
        value: f64,
    },

    /// A test fraction outside (0, 1).
    #[error("test fraction {value} is not allowed; expected a number strictly between 0 and 1")]
    BadFraction { value: f32 },
    /// A split that would leave one side empty.
    #[error("{origin}: splitting {rows} rows with test fraction {fraction} leaves the {side} split empty; use more rows or another fraction")]
    EmptySplit {
        origin: String,
        rows: usize,
        fraction: f32,
        side: &'static str,
    },
    /// A scaling upper bound that is not finite and positive.
    #[error("scaling upper bound {hi} is not allowed; expected a finite number greater than 0")]
    BadScaleBound { hi: f32 },
    /// A data set whose width does not match what it is used with.
    #[error("{origin}: the data has {found} features, expected {expected}")]
    WidthMismatch {
        origin: String,
        expected: usize,
        found: usize,
    },
    /// A data set whose parts are inconsistent (lengths, labels, non-finite values).
    #[error("{origin}: invalid data set: {reason}")]
    Invalid { origin: String, reason: String },
}

/// Formats a list of column names as `"a", "b", "c"`.
struct Quoted<'a>(&'a [String]);

impl fmt::Display for Quoted<'_> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.0.is_empty() {
            return f.write_str("(none)");
        }
        for (i, name) in self.0.iter().enumerate() {
            if i > 0 {
                f.write_str(", ")?;
            }
            write!(f, "\"{name}\"")?;
        }
        Ok(())
    }
}

/// Formats a cell value, quoted, or `an empty cell`.
struct Cell<'a>(&'a str);

impl fmt::Display for Cell<'_> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.0.is_empty() {
            f.write_str("(an empty cell)")
        } else {
            write!(f, "\"{}\"", self.0)
        }
    }
}

/// Formats IDX dimensions as `60000 x 28 x 28`.
struct Dims<'a>(&'a [u32]);

impl fmt::Display for Dims<'_> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        for (i, d) in self.0.iter().enumerate() {
            if i > 0 {
                f.write_str(" x ")?;
            }
            write!(f, "{d}")?;
        }
        Ok(())
    }
}
