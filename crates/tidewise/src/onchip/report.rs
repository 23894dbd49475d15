//! Parser for the firmware's `tw:` report lines.
//!
//! A report line is `tw:<record> <key>=<value> <key>=<value> ...`: the record name and keys are
//! ASCII letters, digits and `_`; values contain no spaces, except that a key named `msg`
//! is always the last field and its value runs to the end of the line. Integers are decimal,
//! or hexadecimal with a `0x` prefix. Lines without the `tw:` prefix (UART output, QEMU
//! messages) are ignored. `boards/README.md` lists the records the firmware prints.

use super::OnchipError;

/// Prefix of every report line.
pub const PREFIX: &str = "tw:";

/// One `tw:` line.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Record {
    /// 1-based line number in the output.
    pub line: usize,
    /// Record name (`board`, `workload`, ...).
    pub kind: String,
    /// Fields in the order printed.
    pub fields: Vec<(String, String)>,
}

impl Record {
    /// The value of `key`, if present.
    pub fn get(&self, key: &str) -> Option<&str> {
        self.fields
            .iter()
            .find(|(k, _)| k == key)
            .map(|(_, v)| v.as_str())
    }

    /// The value of `key`, or an error naming the record and key.
    pub fn require(&self, key: &str) -> Result<&str, OnchipError> {
        self.get(key).ok_or_else(|| OnchipError::ReportMissing {
            what: format!(
                "line {}: record \"{}\" has no field \"{key}\"",
                self.line, self.kind
            ),
        })
    }

    /// `key` as an unsigned integer (decimal or `0x` hexadecimal).
    pub fn u64(&self, key: &str) -> Result<u64, OnchipError> {
        let value = self.require(key)?;
        let parsed = match value.strip_prefix("0x") {
            Some(hex) => u64::from_str_radix(hex, 16).ok(),
            None => value.parse().ok(),
        };
        parsed.ok_or_else(|| self.bad_value(key, value, "an unsigned integer"))
    }

    /// `key` as a signed integer (decimal).
    pub fn i64(&self, key: &str) -> Result<i64, OnchipError> {
        let value = self.require(key)?;
        value
            .parse()
            .map_err(|_| self.bad_value(key, value, "a signed decimal integer"))
    }

    fn bad_value(&self, key: &str, value: &str, expected: &'static str) -> OnchipError {
        OnchipError::ReportValue {
            line: self.line,
            record: self.kind.clone(),
            key: key.to_string(),
            value: value.to_string(),
            expected,
        }
    }
}

/// All report lines of one run.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Report {
    /// Records in output order.
    pub records: Vec<Record>,
}

fn is_name(s: &str) -> bool {
    !s.is_empty() && s.bytes().all(|b| b.is_ascii_alphanumeric() || b == b'_')
}

fn parse_line(line: usize, text: &str) -> Result<Record, OnchipError> {
    let bad = |message: &str| OnchipError::ReportLine {
        line,
        message: message.to_string(),
        text: text.to_string(),
    };
    let body = text.strip_prefix(PREFIX).unwrap_or(text);
    let (kind, mut rest) = match body.split_once(' ') {
        Some((kind, rest)) => (kind, rest),
        None => (body, ""),
    };
    if !is_name(kind) {
        return Err(bad(
            "the record name must be letters, digits or '_' right after \"tw:\"",
        ));
    }
    let mut fields: Vec<(String, String)> = Vec::new();
    loop {
        rest = rest.trim_start_matches(' ');
        if rest.is_empty() {
            break;
        }
        let Some((key, after)) = rest.split_once('=') else {
            return Err(bad("every field must be key=value"));
        };
        if !is_name(key) {
            return Err(bad(&format!(
                "field name {key:?} must be letters, digits or '_'"
            )));
        }
        let (value, next) = if key == "msg" {
            (after, "")
        } else {
            after.split_once(' ').unwrap_or((after, ""))
        };
        if fields.iter().any(|(k, _)| k == key) {
            return Err(bad(&format!("field \"{key}\" appears twice")));
        }
        fields.push((key.to_string(), value.to_string()));
        rest = next;
    }
    Ok(Record {
        line,
        kind: kind.to_string(),
        fields,
    })
}

impl Report {
    /// Parses every `tw:` line of `output`, ignoring all other lines.
    pub fn parse(output: &str) -> Result<Report, OnchipError> {
        let mut records = Vec::new();
        for (i, raw) in output.lines().enumerate() {
            let text = raw.trim_end_matches('\r');
            if text.starts_with(PREFIX) {
                records.push(parse_line(i + 1, text)?);
            }
        }
        Ok(Report { records })
    }

    /// The first record named `kind`.
    pub fn first(&self, kind: &str) -> Option<&Record> {
        self.records.iter().find(|r| r.kind == kind)
    }

    /// The first record named `kind`, or an error saying it is missing.
    pub fn require(&self, kind: &str) -> Result<&Record, OnchipError> {
        self.first(kind).ok_or_else(|| OnchipError::ReportMissing {
            what: format!(
                "no \"{PREFIX}{kind}\" line (records present: {})",
                self.kinds()
            ),
        })
    }

    /// The `workload` record with `name=<name>`.
    pub fn workload(&self, name: &str) -> Result<&Record, OnchipError> {
        self.records
            .iter()
            .find(|r| r.kind == "workload" && r.get("name") == Some(name))
            .ok_or_else(|| OnchipError::ReportMissing {
                what: format!("no \"{PREFIX}workload name={name}\" line"),
            })
    }

    /// True when the run printed its closing `end status=ok` line.
    pub fn is_complete(&self) -> bool {
        self.records
            .iter()
            .any(|r| r.kind == "end" && r.get("status") == Some("ok"))
    }

    fn kinds(&self) -> String {
        let mut kinds: Vec<&str> = self.records.iter().map(|r| r.kind.as_str()).collect();
        kinds.dedup();
        if kinds.is_empty() {
            "none".to_string()
        } else {
            kinds.join(", ")
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_records_and_ignores_other_lines() {
        let out = "booting\ntw:board name=microbit clock_hz=16000000\r\n\
                   tw:job bytes=3 fnv1a32=0x811c9dc5\nnoise tw:not=this\ntw:end status=ok\n";
        let report = Report::parse(out).unwrap();
        assert_eq!(report.records.len(), 3);
        let board = report.require("board").unwrap();
        assert_eq!(board.line, 2);
        assert_eq!(board.get("name"), Some("microbit"));
        assert_eq!(board.u64("clock_hz").unwrap(), 16_000_000);
        let job = report.require("job").unwrap();
        assert_eq!(job.u64("fnv1a32").unwrap(), 0x811c_9dc5);
        assert!(report.is_complete());
    }

    #[test]
    fn msg_runs_to_the_end_of_the_line() {
        let report =
            Report::parse("tw:panic file=src/a.rs line=7 msg=index 3 out of range: len=2\n")
                .unwrap();
        let panic = report.require("panic").unwrap();
        assert_eq!(panic.u64("line").unwrap(), 7);
        assert_eq!(panic.get("msg"), Some("index 3 out of range: len=2"));
        assert!(!report.is_complete());
    }

    #[test]
    fn signed_values_and_empty_records() {
        let report = Report::parse("tw:workload name=dot result=-5107403\ntw:mark\n").unwrap();
        let w = report.workload("dot").unwrap();
        assert_eq!(w.i64("result").unwrap(), -5_107_403);
        assert!(report.require("mark").unwrap().fields.is_empty());
        assert!(report.workload("other").is_err());
    }

    #[test]
    fn malformed_lines_are_errors_with_their_line_number() {
        for (text, needle) in [
            ("ok\ntw:board name\n", "key=value"),
            ("ok\ntw: board=x\n", "record name"),
            ("ok\ntw:board a=1 a=2\n", "twice"),
            ("ok\ntw:board na-me=1\n", "field name"),
        ] {
            match Report::parse(text) {
                Err(OnchipError::ReportLine { line, message, .. }) => {
                    assert_eq!(line, 2, "{text:?}");
                    assert!(message.contains(needle), "{message}");
                }
                other => panic!("{text:?} gave {other:?}"),
            }
        }
    }

    #[test]
    fn wrong_value_kinds_name_the_field() {
        let report = Report::parse("tw:calib ticks=12x\n").unwrap();
        let calib = report.require("calib").unwrap();
        let err = calib.u64("ticks").unwrap_err().to_string();
        assert!(err.contains("ticks=\"12x\""), "{err}");
        let err = calib.u64("instr").unwrap_err().to_string();
        assert!(err.contains("no field \"instr\""), "{err}");
        let err = report.require("end").unwrap_err().to_string();
        assert!(err.contains("records present: calib"), "{err}");
    }
}
