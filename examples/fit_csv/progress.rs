//! Progress bars on stderr (indicatif): bytes of a file read, iterations of
//! an iterative fit. They are drawn only when stderr is a terminal and
//! `--no-progress` is absent; otherwise every call is a no-op.

use std::io::IsTerminal;

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// Whether bars are drawn at all.
#[derive(Debug, Clone, Copy)]
pub struct Bars {
    on: bool,
}

impl Bars {
    /// Bars on stderr when it is a terminal and the user did not opt out.
    pub fn new(disabled: bool) -> Self {
        Bars {
            on: !disabled && std::io::stderr().is_terminal(),
        }
    }

    fn bar(self, len: u64, template: &str, label: &str) -> Bar {
        if !self.on {
            return Bar(None);
        }
        let style = ProgressStyle::with_template(template)
            .unwrap_or_else(|_| ProgressStyle::default_bar())
            .progress_chars("=> ");
        let bar = ProgressBar::with_draw_target(Some(len), ProgressDrawTarget::stderr())
            .with_style(style)
            .with_message(label.to_string());
        Bar(Some(bar))
    }

    /// A bar over the bytes of a file.
    pub fn bytes(self, total: u64, label: &str) -> Bar {
        self.bar(
            total,
            "{msg:>12} [{bar:32}] {bytes}/{total_bytes} ({eta} left)",
            label,
        )
    }

    /// A bar over the iterations of a fit.
    pub fn iterations(self, limit: u64, label: &str) -> Bar {
        self.bar(limit, "{msg:>12} [{bar:32}] iteration {pos}/{len}", label)
    }
}

/// One bar (or nothing).
#[derive(Debug)]
pub struct Bar(Option<ProgressBar>);

impl Bar {
    /// Moves the bar to `pos`.
    pub fn set(&self, pos: u64) {
        if let Some(b) = &self.0 {
            b.set_position(pos);
        }
    }

    /// Removes the bar from the terminal.
    pub fn clear(&self) {
        if let Some(b) = &self.0 {
            b.finish_and_clear();
        }
    }
}

impl Drop for Bar {
    fn drop(&mut self) {
        self.clear();
    }
}
