//! Progress on stderr: one plain status line, rewritten in place while a terminal watches
//! (`float arm · epoch 12 of 40`, `run 3 of 18`), nothing at all when stderr is a file or a
//! pipe, so logs and test output stay clean.

use std::io::IsTerminal;

use crate::arms::Arm;

/// A status line on stderr; inert when stderr is not a terminal.
pub struct StatusLine(Option<indicatif::ProgressBar>);

impl StatusLine {
    /// A status line on stderr when it is a terminal, an inert one otherwise.
    pub fn new() -> Self {
        if !std::io::stderr().is_terminal() {
            return Self(None);
        }
        let line = indicatif::ProgressBar::new(0);
        // Only the message and the time spent: no bar, no counter of our own beside it.
        line.set_style(
            indicatif::ProgressStyle::with_template("{msg} · {elapsed} so far")
                .unwrap_or_else(|_| indicatif::ProgressStyle::default_spinner()),
        );
        Self(Some(line))
    }

    /// Replaces the line's text.
    pub fn show(&self, text: String) {
        if let Some(line) = &self.0 {
            line.set_message(text);
        }
    }

    /// Removes the line from the terminal.
    pub fn clear(self) {
        if let Some(line) = self.0 {
            line.finish_and_clear();
        }
    }
}

impl Default for StatusLine {
    fn default() -> Self {
        Self::new()
    }
}

/// The text after an arm's epoch: `fixed arm · epoch 12 of 40`.
pub fn epoch_text(arm: Arm, epoch: u16, epochs: u16) -> String {
    format!("{} arm · epoch {epoch} of {epochs}", arm.name())
}

/// The text after a sweep's run: `run 3 of 18`.
pub fn run_text(done: u64, todo: u64) -> String {
    format!("run {done} of {todo}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn texts_read_as_plain_words() {
        // Project convention (no outside source): words and numbers only, no drawn bar.
        assert_eq!(epoch_text(Arm::Fixed, 12, 40), "fixed arm · epoch 12 of 40");
        assert_eq!(epoch_text(Arm::Float, 1, 1), "float arm · epoch 1 of 1");
        assert_eq!(run_text(3, 18), "run 3 of 18");
        for t in [epoch_text(Arm::Fixed, 3, 9), run_text(1, 2)] {
            assert!(!t.contains('[') && !t.contains("=>"), "{t}");
        }
    }
}
