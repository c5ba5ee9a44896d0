//! Pieces of the command line that are worth testing on their own: the exit
//! status of an error, the terminal progress bar and the thread pool.

use std::io::IsTerminal;
use std::sync::Mutex;

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

use crate::diagnostics::Progress;

/// Exit status for an error: 2 when the user must fix an input (study, data,
/// formula, settings, output folder), 1 for anything else (internal).
pub fn classify(err: &anyhow::Error) -> u8 {
    for cause in err.chain() {
        if cause.is::<crate::study::StudyError>()
            || cause.is::<crate::model::ModelError>()
            || cause.is::<crate::fit::FitError>()
            || cause.is::<crate::audit::AuditError>()
        {
            return 2;
        }
        if cause.is::<crate::output::OutputError>() {
            return 2;
        }
    }
    1
}

/// Runs `f` inside a rayon pool of `threads` workers (all cores when None).
pub fn with_threads<T>(threads: Option<usize>, f: impl FnOnce() -> anyhow::Result<T> + Send) -> anyhow::Result<T>
where
    T: Send,
{
    let mut builder = rayon::ThreadPoolBuilder::new();
    if let Some(n) = threads {
        builder = builder.num_threads(n);
    }
    let pool = builder.build()?;
    pool.install(f)
}

/// A progress bar on stderr when stderr is a terminal and not `--quiet`.
pub struct TerminalProgress {
    bar: Mutex<Option<ProgressBar>>,
    enabled: bool,
}

impl TerminalProgress {
    /// A progress reporter; silent when `quiet` or when stderr is not a terminal.
    pub fn new(quiet: bool) -> Self {
        TerminalProgress { bar: Mutex::new(None), enabled: !quiet && std::io::stderr().is_terminal() }
    }
}

impl Progress for TerminalProgress {
    fn start(&self, stage: &str, total: u64) {
        if !self.enabled {
            return;
        }
        let bar = ProgressBar::with_draw_target(Some(total), ProgressDrawTarget::stderr());
        let style = ProgressStyle::with_template("{msg:>14} [{bar:40}] {pos}/{len} {elapsed}")
            .unwrap_or_else(|_| ProgressStyle::default_bar())
            .progress_chars("=> ");
        bar.set_style(style);
        bar.set_message(stage.to_string());
        if let Ok(mut slot) = self.bar.lock() {
            *slot = Some(bar);
        }
    }

    fn advance(&self, n: u64) {
        if let Ok(slot) = self.bar.lock() {
            if let Some(bar) = slot.as_ref() {
                bar.inc(n);
            }
        }
    }

    fn finish(&self) {
        if let Ok(mut slot) = self.bar.lock() {
            if let Some(bar) = slot.take() {
                bar.finish_and_clear();
            }
        }
    }
}
