//! CSV data: a header row, one named label column, every other column a numeric feature.
//!
//! Rules:
//! - Line 1 is the header. Cells and names are trimmed of surrounding spaces; RFC 4180 quoting
//!   (`docs/references.md` \[34\]) is understood (parsing by the `csv` crate). Blank lines
//!   are skipped. A UTF-8 byte-order mark is ignored.
//! - Feature cells must be finite decimal numbers that fit in `f32`; `NaN`, `inf` and values
//!   that overflow `f32` are errors.
//! - Labels: when every label cell is a number, the numbers are the class indices themselves
//!   and must be whole numbers in `0..=65535`; `n_classes` is the largest index plus one.
//!   Otherwise every label is a name: the distinct names, sorted by byte order (Rust `str`
//!   ordering, so `"B" < "a"` and `"10" < "9"`), get the class indices 0, 1, 2, ... in that order.
//! - Every error names the line (1-based; the header is line 1) and, for a cell, the column
//!   (1-based) and its header name.

use std::path::Path;

use super::{DataError, Dataset};

/// A parsed CSV file: the data set and the names that go with it.
#[derive(Debug, Clone, PartialEq)]
pub struct CsvTable {
    /// The features and class indices.
    pub dataset: Dataset,
    /// Header names of the feature columns, in order.
    pub feature_names: Vec<String>,
    /// The name of each class index: the label strings (sorted), or the numbers `"0"`, `"1"`, ...
    pub class_names: Vec<String>,
}

/// Reads a CSV file (see the module documentation for the rules).
pub fn load_csv(path: &Path, label_column: &str) -> Result<Dataset, DataError> {
    load_csv_table(path, label_column).map(|t| t.dataset)
}

/// Reads a CSV file and keeps the feature and class names.
pub fn load_csv_table(path: &Path, label_column: &str) -> Result<CsvTable, DataError> {
    let origin = path.display().to_string();
    let bytes = std::fs::read(path).map_err(|err| DataError::Io {
        path: origin.clone(),
        err,
    })?;
    let text = match std::str::from_utf8(&bytes) {
        Ok(t) => t,
        Err(e) => {
            let byte = e.valid_up_to();
            let line = 1 + bytes[..byte].iter().filter(|&&b| b == b'\n').count() as u64;
            return Err(DataError::NotUtf8 { origin, line, byte });
        }
    };
    parse_csv_table(text, label_column, &origin)
}

/// Parses CSV text; `source` names it in messages and in [`Dataset::source`].
pub fn parse_csv(text: &str, label_column: &str, source: &str) -> Result<Dataset, DataError> {
    parse_csv_table(text, label_column, source).map(|t| t.dataset)
}

/// Parses CSV text and keeps the feature and class names.
pub fn parse_csv_table(
    text: &str,
    label_column: &str,
    source: &str,
) -> Result<CsvTable, DataError> {
    let origin = source.to_string();
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let mut reader = ::csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .trim(::csv::Trim::All)
        .from_reader(text.as_bytes());
    let mut records = reader.records();

    // Header: the first record that is not a blank line.
    let header = loop {
        match records.next() {
            None => return Err(DataError::EmptyFile { origin }),
            Some(rec) => {
                let rec = rec.map_err(|e| syntax_error(&origin, &e))?;
                if !is_blank(&rec) {
                    break rec;
                }
            }
        }
    };
    let mut lines = LineCounter::new(text);

    let names: Vec<String> = header.iter().map(str::to_string).collect();
    let label_at: Vec<usize> = names
        .iter()
        .enumerate()
        .filter(|(_, n)| n.as_str() == label_column)
        .map(|(i, _)| i)
        .collect();
    let label_col = match label_at.as_slice() {
        [] => {
            return Err(DataError::MissingLabelColumn {
                origin,
                wanted: label_column.to_string(),
                available: names,
            })
        }
        [one] => *one,
        [first, second, ..] => {
            return Err(DataError::DuplicateLabelColumn {
                origin,
                wanted: label_column.to_string(),
                first: first + 1,
                second: second + 1,
            })
        }
    };
    if names.len() == 1 {
        return Err(DataError::NoFeatureColumns {
            origin,
            label: label_column.to_string(),
        });
    }
    let n_features = names.len() - 1;

    let mut features: Vec<f32> = Vec::new();
    let mut raw_labels: Vec<String> = Vec::new();
    let mut label_lines: Vec<u64> = Vec::new();
    for rec in records {
        let rec = rec.map_err(|e| syntax_error(&origin, &e))?;
        if is_blank(&rec) {
            continue;
        }
        let line = lines.line_at(&rec);
        if rec.len() != names.len() {
            return Err(DataError::RaggedRow {
                origin,
                line,
                expected: names.len(),
                found: rec.len(),
            });
        }
        for (j, cell) in rec.iter().enumerate() {
            if j == label_col {
                raw_labels.push(cell.to_string());
                label_lines.push(line);
                continue;
            }
            let cell_error = |finite: bool| {
                let (origin, header, value) = (origin.clone(), names[j].clone(), cell.to_string());
                let column = j + 1;
                if finite {
                    DataError::NotANumber {
                        origin,
                        line,
                        column,
                        header,
                        value,
                    }
                } else {
                    DataError::NotFinite {
                        origin,
                        line,
                        column,
                        header,
                        value,
                    }
                }
            };
            match cell.parse::<f32>() {
                Ok(v) if v.is_finite() => features.push(v),
                Ok(_) => return Err(cell_error(false)),
                Err(_) => return Err(cell_error(true)),
            }
        }
    }
    if raw_labels.is_empty() {
        return Err(DataError::NoDataRows { origin });
    }

    let label_error = |i: usize, reason: &'static str| DataError::BadLabel {
        origin: origin.clone(),
        line: label_lines[i],
        column: label_col + 1,
        header: names[label_col].clone(),
        value: raw_labels[i].clone(),
        reason,
    };
    if let Some(i) = raw_labels.iter().position(|l| l.is_empty()) {
        return Err(label_error(i, "is missing; every row needs a label"));
    }
    let numeric: Option<Vec<f64>> = raw_labels.iter().map(|l| l.parse::<f64>().ok()).collect();
    let (labels, class_names) = match numeric {
        Some(values) => {
            let mut labels = Vec::with_capacity(values.len());
            for (i, &v) in values.iter().enumerate() {
                if !(v.is_finite() && v.fract() == 0.0) {
                    return Err(label_error(
                        i,
                        "is not a whole number; numeric labels are class indices 0..=65535",
                    ));
                }
                if !(0.0..=65535.0).contains(&v) {
                    return Err(label_error(
                        i,
                        "is outside 0..=65535; numeric labels are class indices",
                    ));
                }
                labels.push(v as u16);
            }
            let k = labels.iter().copied().max().map_or(0, usize::from) + 1;
            (labels, (0..k).map(|c| c.to_string()).collect::<Vec<_>>())
        }
        None => {
            let mut distinct: Vec<&str> = raw_labels.iter().map(String::as_str).collect();
            distinct.sort_unstable();
            distinct.dedup();
            if distinct.len() > usize::from(u16::MAX) + 1 {
                return Err(DataError::TooManyClasses {
                    origin,
                    found: distinct.len(),
                });
            }
            let mut labels = Vec::with_capacity(raw_labels.len());
            for l in &raw_labels {
                // Every label is in `distinct`, and there are at most 65536 of them.
                let idx = distinct.binary_search(&l.as_str()).unwrap_or(0);
                labels.push(idx as u16);
            }
            let names = distinct.iter().map(|s| s.to_string()).collect::<Vec<_>>();
            (labels, names)
        }
    };

    let feature_names = names
        .iter()
        .enumerate()
        .filter(|&(j, _)| j != label_col)
        .map(|(_, n)| n.clone())
        .collect();
    Ok(CsvTable {
        dataset: Dataset {
            n_features,
            n_classes: class_names.len(),
            features,
            labels,
            source: origin,
        },
        feature_names,
        class_names,
    })
}

/// Writes a data set as CSV: a header of `feature_names` then `label_column`, one row per
/// sample, features in Rust's shortest round-trip form (so [`parse_csv`] gives back the same
/// `f32` values), labels as `class_names[label]` or, with `None`, as the class index.
/// Names must not need quoting (no commas, quotes or line breaks).
pub fn format_csv(
    ds: &Dataset,
    feature_names: &[&str],
    label_column: &str,
    class_names: Option<&[&str]>,
) -> Result<String, DataError> {
    let invalid = |reason: String| DataError::Invalid {
        origin: ds.source.clone(),
        reason,
    };
    if feature_names.len() != ds.n_features {
        return Err(DataError::WidthMismatch {
            origin: ds.source.clone(),
            expected: feature_names.len(),
            found: ds.n_features,
        });
    }
    if let Some(names) = class_names {
        if names.len() < ds.n_classes {
            return Err(invalid(format!(
                "{} class names given for {} classes",
                names.len(),
                ds.n_classes
            )));
        }
    }
    let all_names = feature_names
        .iter()
        .chain(std::iter::once(&label_column))
        .chain(class_names.unwrap_or(&[]).iter());
    for name in all_names {
        if name.is_empty() || name.contains([',', '"', '\n', '\r']) || name.trim() != *name {
            return Err(invalid(format!(
                "name \"{name}\" cannot be written unquoted; names must be non-empty, without commas, quotes, line breaks or surrounding spaces"
            )));
        }
    }
    if ds.features.len() != ds.len() * ds.n_features {
        return Err(invalid("features do not match rows x n_features".into()));
    }
    let mut out = String::with_capacity(ds.features.len() * 8 + 64);
    write_csv_rows(&mut out, ds, feature_names, label_column, class_names);
    Ok(out)
}

/// The writer behind [`format_csv`]; callers have checked the names and sizes.
pub(crate) fn write_csv_rows(
    out: &mut String,
    ds: &Dataset,
    feature_names: &[&str],
    label_column: &str,
    class_names: Option<&[&str]>,
) {
    use std::fmt::Write;
    for name in feature_names {
        out.push_str(name);
        out.push(',');
    }
    out.push_str(label_column);
    out.push('\n');
    for (i, &label) in ds.labels.iter().enumerate() {
        for v in ds.row(i) {
            // Writing to a String cannot fail.
            let _ = write!(out, "{v},");
        }
        match class_names.and_then(|n| n.get(usize::from(label))) {
            Some(name) => out.push_str(name),
            None => {
                let _ = write!(out, "{label}");
            }
        }
        out.push('\n');
    }
}

fn is_blank(rec: &::csv::StringRecord) -> bool {
    rec.iter().all(str::is_empty) && rec.len() <= 1
}

/// Line numbers from byte offsets. The `csv` reader's own line count skips blank lines, and a
/// record's position is where the reader stood after the previous record (before any blank
/// lines), so lines are counted here: from that offset, line terminators are skipped to the
/// record's first byte. `\n`, `\r\n` and a lone `\r` each end a line. Records arrive in
/// order, so the count advances incrementally.
struct LineCounter<'a> {
    text: &'a [u8],
    at: usize,
    line: u64,
}

impl<'a> LineCounter<'a> {
    fn new(text: &'a str) -> Self {
        LineCounter {
            text: text.as_bytes(),
            at: 0,
            line: 1,
        }
    }

    fn line_at(&mut self, rec: &::csv::StringRecord) -> u64 {
        let byte = rec.position().map_or(0, |p| p.byte());
        let end = usize::try_from(byte)
            .unwrap_or(usize::MAX)
            .min(self.text.len());
        while self.at < self.text.len() {
            let b = self.text[self.at];
            let terminator = b == b'\n' || b == b'\r';
            if self.at >= end && !terminator {
                break;
            }
            let lone_cr = b == b'\r' && self.text.get(self.at + 1) != Some(&b'\n');
            if b == b'\n' || lone_cr {
                self.line += 1;
            }
            self.at += 1;
        }
        self.line
    }
}

/// The reader is built over `&str` and is flexible, so it reports no field-count or UTF-8
/// errors; this maps whatever else it might report to a message with the line.
fn syntax_error(origin: &str, e: &::csv::Error) -> DataError {
    let line = e.position().map_or(1, |p| p.line());
    DataError::Invalid {
        origin: origin.to_string(),
        reason: format!("line {line}: {e}"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn err(text: &str, label: &str) -> String {
        match parse_csv(text, label, "t.csv") {
            Ok(ds) => panic!("expected an error, got {ds:?}"),
            Err(e) => e.to_string(),
        }
    }

    #[test]
    fn parses_numeric_labels() {
        let ds = parse_csv("a,b,y\n1,2,0\n3.5,-4e-1,2\n", "y", "t.csv").unwrap();
        assert_eq!(ds.n_features, 2);
        assert_eq!(ds.n_classes, 3);
        assert_eq!(ds.features, vec![1.0, 2.0, 3.5, -0.4]);
        assert_eq!(ds.labels, vec![0, 2]);
        assert_eq!(ds.source, "t.csv");
    }

    #[test]
    fn label_column_anywhere_and_string_labels_sorted() {
        let t = parse_csv_table(
            "state, x ,z\n normal ,1,2\ncavitation,3,4\n\"dry-run\",5,6\nnormal,7,8\n",
            "state",
            "t",
        )
        .unwrap();
        assert_eq!(t.class_names, vec!["cavitation", "dry-run", "normal"]);
        assert_eq!(t.dataset.labels, vec![2, 0, 1, 2]);
        assert_eq!(t.feature_names, vec!["x", "z"]);
        assert_eq!(t.dataset.row(2), &[5.0, 6.0]);
    }

    #[test]
    fn mixed_labels_are_names() {
        let t = parse_csv_table("x,y\n1,10\n2,9\n3,cat\n", "y", "t").unwrap();
        // Byte order: "10" < "9" < "cat".
        assert_eq!(t.class_names, vec!["10", "9", "cat"]);
        assert_eq!(t.dataset.labels, vec![0, 1, 2]);
    }

    #[test]
    fn crlf_blank_lines_and_bom() {
        let ds = parse_csv("\u{feff}x,y\r\n1,0\r\n\r\n2,1\r\n", "y", "t").unwrap();
        assert_eq!(ds.features, vec![1.0, 2.0]);
        assert_eq!(ds.labels, vec![0, 1]);
    }

    #[test]
    fn line_numbers_count_blank_lines_and_cr() {
        let e = err("a,y\r\n\r\n1,0\r\n\r\nx,1\r\n", "y");
        assert!(e.contains("line 5, column 1"), "{e}");
        let e = err("a,y\r1,0\r\rx,1\r", "y");
        assert!(e.contains("line 4, column 1"), "{e}");
    }

    #[test]
    fn ragged_row_names_line_and_counts() {
        let e = err("a,b,y\n1,2,0\n1,2\n", "y");
        assert!(e.contains("line 3"), "{e}");
        assert!(e.contains("expected 3 fields"), "{e}");
        assert!(e.contains("found 2"), "{e}");
        // A blank line in between still counts as a line.
        let e = err("a,b,y\n1,2,0\n\n1,2,0,9\n", "y");
        assert!(e.contains("line 4") && e.contains("found 4"), "{e}");
    }

    #[test]
    fn non_numeric_cell_names_line_column_header() {
        let e = err("a,b,y\n1,2,0\n1,abc,1\n", "y");
        assert!(e.contains("line 3, column 2 (\"b\")"), "{e}");
        assert!(e.contains("\"abc\" is not a number"), "{e}");
        let e = err("y,a,b\n0,1,\n", "y");
        assert!(e.contains("line 2, column 3 (\"b\")"), "{e}");
        assert!(e.contains("empty cell"), "{e}");
    }

    #[test]
    fn nan_and_infinity_cells_rejected() {
        for bad in ["NaN", "nan", "inf", "-infinity", "1e39"] {
            let e = err(&format!("a,b,y\n1,2,0\n3,{bad},1\n"), "y");
            assert!(e.contains("line 3, column 2 (\"b\")"), "{bad}: {e}");
            assert!(e.contains("not finite"), "{bad}: {e}");
        }
    }

    #[test]
    fn missing_label_column_lists_columns() {
        let e = err("a,b,label\n1,2,0\n", "class");
        assert!(e.contains("line 1"), "{e}");
        assert!(e.contains("\"class\""), "{e}");
        assert!(
            e.contains("columns available: \"a\", \"b\", \"label\""),
            "{e}"
        );
        let e = err("y,a,y\n0,1,0\n", "y");
        assert!(e.contains("columns 1 and 3"), "{e}");
        let e = err("y\n0\n", "y");
        assert!(e.contains("feature column"), "{e}");
    }

    #[test]
    fn empty_file_and_no_rows() {
        for empty in ["", "\n", "\n\n"] {
            let e = err(empty, "y");
            assert!(e.contains("empty") && e.contains("line 1"), "{e}");
        }
        let e = err("a,y\n", "y");
        assert!(e.contains("no data rows"), "{e}");
        let e = err("a,y\n\n\n", "y");
        assert!(e.contains("no data rows"), "{e}");
    }

    #[test]
    fn labels_out_of_range() {
        let e = err("a,y\n1,0\n2,65536\n", "y");
        assert!(e.contains("line 3, column 2 (\"y\")"), "{e}");
        assert!(e.contains("65536") && e.contains("0..=65535"), "{e}");
        let e = err("y,a\n-1,1\n", "y");
        assert!(
            e.contains("line 2, column 1 (\"y\")") && e.contains("\"-1\""),
            "{e}"
        );
        let e = err("a,y\n1,0\n2,1.5\n", "y");
        assert!(
            e.contains("line 3, column 2") && e.contains("whole number"),
            "{e}"
        );
        let e = err("a,y\n1,0\n2,\n", "y");
        assert!(
            e.contains("line 3, column 2") && e.contains("missing"),
            "{e}"
        );
        let ok = parse_csv("a,y\n1,65535\n", "y", "t").unwrap();
        assert_eq!(ok.n_classes, 65536);
        assert_eq!(ok.labels, vec![65535]);
    }

    #[test]
    fn too_many_distinct_names() {
        let mut text = String::from("x,y\n");
        for i in 0..65_537 {
            text.push_str(&format!("1,c{i}\n"));
        }
        let e = err(&text, "y");
        assert!(
            e.contains("65537 distinct labels") && e.contains("at most 65536"),
            "{e}"
        );
        // One fewer fits.
        let cut = text.rfind("1,c").unwrap_or(0);
        let ds = parse_csv(&text[..cut], "y", "t").unwrap();
        assert_eq!(ds.n_classes, 65_536);
    }

    #[test]
    fn quoted_multiline_field_reports_record_start_line() {
        let e = err("a,name,y\n1,\"two\nlines\",0\n2,x\n", "y");
        assert!(
            e.contains("not a number") && e.contains("line 2, column 2"),
            "{e}"
        );
    }

    #[test]
    fn format_then_parse_round_trips() {
        let ds = Dataset::new(
            2,
            3,
            vec![0.1, -1.0e-7, 3.4028235e38, 1.0 / 3.0],
            vec![2, 0],
            "t",
        )
        .unwrap();
        let text = format_csv(&ds, &["p", "q"], "y", None).unwrap();
        let back = parse_csv(&text, "y", "t").unwrap();
        assert_eq!(back.features, ds.features);
        assert_eq!(back.labels, ds.labels);
        let named = format_csv(&ds, &["p", "q"], "y", Some(&["a", "b", "c"])).unwrap();
        assert!(named.ends_with(",c\n") || named.contains(",c\n"), "{named}");
        let back = parse_csv_table(&named, "y", "t").unwrap();
        assert_eq!(back.class_names, vec!["a", "c"]);
        assert!(format_csv(&ds, &["p"], "y", None).is_err());
        assert!(format_csv(&ds, &["p", "q,r"], "y", None).is_err());
    }

    #[test]
    fn load_csv_from_file_and_errors() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("d.csv");
        std::fs::write(&path, "x,y\n1,a\n2,b\n").unwrap();
        let ds = load_csv(&path, "y").unwrap();
        assert_eq!(ds.labels, vec![0, 1]);
        assert_eq!(ds.source, path.display().to_string());
        let missing = dir.path().join("nope.csv");
        let e = load_csv(&missing, "y").unwrap_err().to_string();
        assert!(e.contains("nope.csv") && e.contains("cannot read"), "{e}");
        std::fs::write(&path, b"x,y\n1,0\n\xff,1\n").unwrap();
        let e = load_csv(&path, "y").unwrap_err().to_string();
        assert!(e.contains("line 3") && e.contains("UTF-8"), "{e}");
    }
}
