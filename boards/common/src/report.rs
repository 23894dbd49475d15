//! `tw:` report lines over semihosting.
//!
//! Each call of [`tw!`](crate::tw) writes one line `tw:<record> key=value ...` to the host's
//! standard output in as few semihosting writes as the line buffer allows. Newlines inside the
//! formatted text are turned into spaces, so a record is always exactly one line.

use core::cell::Cell;
use core::fmt::{self, Write};

use cortex_m::interrupt::{self, Mutex};
use cortex_m_semihosting::hio::{self, HostStream};

/// The host's standard output, opened on first use and kept, so that a long run does not open
/// a new host handle per line.
static STDOUT: Mutex<Cell<Option<HostStream>>> = Mutex::new(Cell::new(None));

fn stdout() -> Option<HostStream> {
    interrupt::free(|cs| {
        let cell = STDOUT.borrow(cs);
        if cell.get().is_none() {
            cell.set(hio::hstdout().ok());
        }
        cell.get()
    })
}

/// A line being assembled: a small buffer that is flushed when full and at the end.
pub struct LineWriter {
    buf: [u8; 128],
    len: usize,
    stream: Option<HostStream>,
}

impl LineWriter {
    /// Starts a line with the `tw:` prefix.
    pub fn new() -> Self {
        let mut w = LineWriter {
            buf: [0; 128],
            len: 0,
            stream: stdout(),
        };
        w.push(b"tw:");
        w
    }

    fn flush(&mut self) {
        if let Some(stream) = self.stream.as_mut() {
            // Nothing useful can be done if the host refuses the write.
            let _ = stream.write_all(self.buf.get(..self.len).unwrap_or_default());
        }
        self.len = 0;
    }

    fn push(&mut self, bytes: &[u8]) {
        for &b in bytes {
            if self.len == self.buf.len() {
                self.flush();
            }
            if let Some(slot) = self.buf.get_mut(self.len) {
                *slot = if b == b'\n' || b == b'\r' { b' ' } else { b };
                self.len += 1;
            }
        }
    }

    /// Ends the line and writes what is left.
    pub fn finish(mut self) {
        if self.len == self.buf.len() {
            self.flush();
        }
        if let Some(slot) = self.buf.get_mut(self.len) {
            *slot = b'\n';
            self.len += 1;
        }
        self.flush();
    }
}

impl Default for LineWriter {
    fn default() -> Self {
        Self::new()
    }
}

impl Write for LineWriter {
    fn write_str(&mut self, s: &str) -> fmt::Result {
        self.push(s.as_bytes());
        Ok(())
    }
}

/// Writes one report line from format arguments (used by [`tw!`](crate::tw)).
pub fn line(args: fmt::Arguments) {
    let mut w = LineWriter::new();
    // LineWriter never fails; a failing Display impl only truncates the line.
    let _ = w.write_fmt(args);
    w.finish();
}

/// Prints one `tw:` report line: `tw!("workload name={} ...", name)`.
#[macro_export]
macro_rules! tw {
    ($($arg:tt)*) => {
        $crate::report::line(format_args!($($arg)*))
    };
}
