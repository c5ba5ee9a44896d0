//! Pieces of the command line that are worth testing on their own: the exit
//! status of an error, the terminal progress bar and the thread pool.

use std::io::IsTerminal;
use std::sync::Mutex;
use std::time::{Duration, Instant};

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

use crate::diagnostics::Progress;

/// Largest `--threads`.
pub const MAX_THREADS: usize = 256;

/// Longest line of an error message shown on the terminal, in characters.
pub const MAX_MESSAGE_LINE: usize = 1000;

/// Most lines of an error message shown on the terminal.
pub const MAX_MESSAGE_LINES: usize = 60;

/// Text made safe for a terminal: every control character other than a
/// line feed is shown as `\u{..}` (so an escape sequence in a file name
/// or a TOML error's quoted source line cannot drive the terminal), each
/// line is cut at [`MAX_MESSAGE_LINE`] characters and the whole at
/// [`MAX_MESSAGE_LINES`] lines.
pub fn terminal_safe(text: &str) -> String {
    let mut out = String::with_capacity(text.len().min(1 << 16));
    let lines: Vec<&str> = text.split('\n').collect();
    for (i, line) in lines.iter().enumerate() {
        if i == MAX_MESSAGE_LINES {
            out.push_str(&format!("\n... ({} more lines)", lines.len() - i));
            break;
        }
        if i > 0 {
            out.push('\n');
        }
        for (shown, c) in line.chars().enumerate() {
            if shown == MAX_MESSAGE_LINE {
                out.push_str(&format!("... ({} characters)", line.chars().count()));
                break;
            }
            if crate::study::is_unsafe_char(c) && c != '\t' {
                out.push_str(&format!("\\u{{{:x}}}", c as u32));
            } else {
                out.push(c);
            }
        }
    }
    out
}

/// A value shortened to at most `max` characters for an echo.
pub fn bounded(value: &str, max: usize) -> String {
    let n = value.chars().count();
    if n <= max {
        value.to_string()
    } else {
        let head: String = value.chars().take(max).collect();
        format!("{head}... ({n} characters)")
    }
}

/// Exit status for an error: 2 when the user must fix an input (study, data,
/// formula, settings, output folder), 1 for anything else (internal).
pub fn classify(err: &anyhow::Error) -> u8 {
    classify_error(err.as_ref())
}

/// [`classify`] for a library error and its chain of sources.
pub fn classify_error(err: &(dyn std::error::Error + 'static)) -> u8 {
    let mut next = Some(err);
    while let Some(cause) = next {
        next = cause.source();
        if cause.is::<crate::study::StudyError>()
            || cause.is::<crate::model::ModelError>()
            || cause.is::<crate::fit::FitError>()
            || cause.is::<crate::audit::AuditError>()
            || cause.is::<crate::demo::DemoError>()
            || cause.is::<crate::batch::PartsError>()
        {
            return 2;
        }
        if cause.is::<crate::output::OutputError>() {
            return 2;
        }
        // The batch layer's transparent variants hide their inner error.
        if let Some(b) = cause.downcast_ref::<crate::batch::BatchError>() {
            use crate::batch::BatchError as B;
            match b {
                B::Parts(_) | B::EmptyFolder(_) | B::Study(_) | B::Audit(_) | B::Output(_) | B::Io { .. } => {
                    return 2
                }
                B::Report(crate::report::ReportError::Output(_)) => return 2,
                _ => {}
            }
        }
        // Transparent wrappers hide the output error from the chain.
        if let Some(crate::report::ReportError::Output(_)) = cause.downcast_ref() {
            return 2;
        }
    }
    1
}

/// A safe folder name for a study name: letters, digits, `-`, `_` and `.`
/// kept, anything else replaced by `_`; a name of dots only (or empty)
/// becomes `study`, so a
/// hostile study file name cannot move the default output folder.
pub fn folder_name(name: &str) -> String {
    let clean: String = name
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || "-_.".contains(c) {
                c
            } else {
                '_'
            }
        })
        .collect();
    if clean.chars().all(|c| c == '.') {
        "study".to_string()
    } else {
        clean
    }
}

/// Runs `f` inside a rayon pool of `threads` workers (all cores when None).
pub fn with_threads<T>(
    threads: Option<usize>,
    f: impl FnOnce() -> anyhow::Result<T> + Send,
) -> anyhow::Result<T>
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

/// Progress on stderr unless `--quiet`: a bar when stderr is a terminal,
/// otherwise (a scheduler's log file) one line per stage and interval,
/// `progress: <stage> <done>/<total> (<percent> %), <elapsed> elapsed`.
pub struct TerminalProgress {
    bar: Mutex<Option<ProgressBar>>,
    lines: Mutex<Option<LineState>>,
    mode: Mode,
}

#[derive(Clone, Copy)]
enum Mode {
    Off,
    Bar,
    Lines(Duration),
}

struct LineState {
    stage: String,
    total: u64,
    done: u64,
    started: Instant,
    last: Instant,
    printed: bool,
}

/// Interval of the progress lines when stderr is not a terminal.
pub const DEFAULT_PROGRESS_INTERVAL: Duration = Duration::from_secs(30);

impl TerminalProgress {
    /// A progress reporter with progress lines every [`DEFAULT_PROGRESS_INTERVAL`].
    pub fn new(quiet: bool) -> Self {
        Self::with_interval(quiet, DEFAULT_PROGRESS_INTERVAL)
    }

    /// A progress reporter: silent when `quiet`, a bar on a terminal,
    /// otherwise a line every `interval` while a stage runs.
    pub fn with_interval(quiet: bool, interval: Duration) -> Self {
        // An interval of zero prints a line at every update.
        let mode = if quiet {
            Mode::Off
        } else if std::io::stderr().is_terminal() {
            Mode::Bar
        } else {
            Mode::Lines(interval)
        };
        TerminalProgress {
            bar: Mutex::new(None),
            lines: Mutex::new(None),
            mode,
        }
    }
}

/// One progress line (what a log shows every interval).
pub fn progress_line(stage: &str, done: u64, total: u64, elapsed: Duration) -> String {
    let pct = if total > 0 {
        100.0 * done.min(total) as f64 / total as f64
    } else {
        100.0
    };
    format!(
        "progress: {stage} {done}/{total} ({pct:.1} %), {} elapsed",
        humantime::format_duration(Duration::from_secs(elapsed.as_secs()))
    )
}

impl Progress for TerminalProgress {
    fn start(&self, stage: &str, total: u64) {
        match self.mode {
            Mode::Off => {}
            Mode::Lines(_) => {
                let now = Instant::now();
                if let Ok(mut slot) = self.lines.lock() {
                    *slot = Some(LineState {
                        stage: stage.to_string(),
                        total,
                        done: 0,
                        started: now,
                        last: now,
                        printed: false,
                    });
                }
            }
            Mode::Bar => {
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
        }
    }

    fn advance(&self, n: u64) {
        match self.mode {
            Mode::Off => {}
            Mode::Lines(interval) => {
                if let Ok(mut slot) = self.lines.lock() {
                    if let Some(st) = slot.as_mut() {
                        st.done += n;
                        let now = Instant::now();
                        if now.duration_since(st.last) >= interval {
                            st.last = now;
                            st.printed = true;
                            eprintln!(
                                "{}",
                                progress_line(&st.stage, st.done, st.total, now - st.started)
                            );
                        }
                    }
                }
            }
            Mode::Bar => {
                if let Ok(slot) = self.bar.lock() {
                    if let Some(bar) = slot.as_ref() {
                        bar.inc(n);
                    }
                }
            }
        }
    }

    fn finish(&self) {
        if let Ok(mut slot) = self.lines.lock() {
            if let Some(st) = slot.take() {
                // A stage that logged a line closes with its final count.
                if st.printed {
                    eprintln!(
                        "{}",
                        progress_line(&st.stage, st.done, st.total, st.started.elapsed())
                    );
                }
            }
        }
        if let Ok(mut slot) = self.bar.lock() {
            if let Some(bar) = slot.take() {
                bar.finish_and_clear();
            }
        }
    }
}

/// The `sigma` line of `check`: the column or the number read, the range
/// of the values, and what it means for the covariance.
fn sigma_words(study: &crate::study::Study) -> String {
    use crate::study::SigmaSpec;
    let range = study.dataset.sigma.as_ref().and_then(|v| {
        let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        (lo <= hi).then_some((lo, hi))
    });
    if study.fit_options.likelihood == crate::fit::Likelihood::Poisson {
        return "none: y holds counts (Poisson likelihood, absolute covariance)".to_string();
    }
    match (&study.sigma_spec, range) {
        (Some(SigmaSpec::Value(v)), _) => format!("{v} for every point (absolute covariance)"),
        (Some(SigmaSpec::Column(c)), Some((lo, hi))) if lo == hi => {
            format!("column {c}, {lo} for every point (absolute covariance)")
        }
        (Some(SigmaSpec::Column(c)), Some((lo, hi))) => {
            format!("column {c}, {lo} to {hi} (absolute covariance)")
        }
        (_, Some((lo, hi))) => format!("given, {lo} to {hi} (absolute covariance)"),
        _ => "none (covariance scaled by chi2/dof)".to_string(),
    }
}

/// What `fitaudit check` prints: what was read, and any warnings.
pub fn check_summary(study: &crate::study::Study) -> String {
    use std::fmt::Write as _;
    let mut s = String::new();
    let d = &study.dataset;
    let _ = writeln!(s, "study      {}", study.path.display());
    if let Some(t) = &study.title {
        let _ = writeln!(s, "title      {}", bounded(t, 200));
    }
    if let Some(f) = &study.data_file {
        let _ = writeln!(s, "data       {} ({} points)", f.display(), d.len());
    } else {
        let _ = writeln!(s, "data       {} points", d.len());
    }
    for g in &d.groups {
        let _ = writeln!(
            s,
            "data set   {}: {} ({} points), x {}, y {}, formula {}, parameters {}",
            g.name,
            g.file.as_deref().unwrap_or("-"),
            g.len,
            g.x_names.join(", "),
            g.y_name,
            g.formula,
            g.parameters.join(", ")
        );
    }
    let _ = writeln!(s, "x          {}", d.x_names.join(", "));
    let _ = writeln!(s, "y          {}", bounded(&d.y_name, 200));
    let _ = writeln!(s, "sigma      {}", bounded(&sigma_words(study), 400));
    if d.sigma_x.is_some() {
        let _ = writeln!(s, "sigma_x    given (errors in x: effective variance)");
    }
    let _ = writeln!(s, "formula    {}", bounded(&study.formula, 1000));
    for p in &study.parameters {
        let mut line = format!("parameter  {} start {}", p.name, p.start);
        if p.min.is_finite() {
            line.push_str(&format!(", min {}", p.min));
        }
        if p.max.is_finite() {
            line.push_str(&format!(", max {}", p.max));
        }
        if p.fixed {
            line.push_str(", fixed");
        }
        let _ = writeln!(s, "{line}");
    }
    for (name, value) in &study.constants {
        let _ = writeln!(s, "constant   {name} = {value}");
    }
    let a = &study.audit;
    let _ = writeln!(
        s,
        "audit      seed {}, level {}, bootstrap {} ({}), Monte Carlo {}, profile {} points, contour grid {}, {} starts",
        a.seed,
        a.level,
        a.bootstrap.replicates,
        serde_json::to_value(a.bootstrap.scheme)
            .ok()
            .and_then(|v| v.as_str().map(str::to_string))
            .unwrap_or_default(),
        a.monte_carlo.replicates,
        a.profile.points,
        a.contours.grid,
        a.multistart.starts
    );
    for w in &study.warnings {
        let _ = writeln!(s, "warning    {}", bounded(&w.to_string(), 1000));
    }
    let _ = writeln!(s, "ok: the study is valid");
    s
}

/// The closing lines of `fitaudit demo`.
pub fn demo_summary(summary: &crate::demo::DemoSummary) -> String {
    use std::fmt::Write as _;
    let mut s = format!("demo reports written under {}\n", summary.out.display());
    for sc in &summary.scenarios {
        let best = match (sc.rebased, sc.base_is_best) {
            (true, _) => "; the start reaches a local minimum: audited at the best minimum found",
            (false, Some(false)) => "; base fit is NOT the best minimum",
            _ => "",
        };
        let _ = writeln!(
            s,
            "  {:<10} {} holds, {} doubtful, {} fails{}  -> {}",
            sc.name,
            sc.holds,
            sc.doubtful,
            sc.fails,
            best,
            sc.folder.join("report.html").display()
        );
    }
    s
}

#[cfg(test)]
mod tests {
    use super::folder_name;

    #[test]
    fn progress_lines_give_count_share_and_elapsed_time() {
        // 1/3 = 33.3 %; 75 s = 1 min 15 s (arithmetic identities).
        assert_eq!(
            super::progress_line("bootstrap", 1, 3, std::time::Duration::from_millis(75_400)),
            "progress: bootstrap 1/3 (33.3 %), 1m 15s elapsed"
        );
        assert_eq!(
            super::progress_line("profile", 0, 0, std::time::Duration::ZERO),
            "progress: profile 0/0 (100.0 %), 0s elapsed"
        );
    }

    #[test]
    fn folder_names_cannot_escape() {
        assert_eq!(folder_name("cooling"), "cooling");
        assert_eq!(folder_name(".."), "study");
        assert_eq!(folder_name("."), "study");
        assert_eq!(folder_name(""), "study");
        assert_eq!(folder_name("a/../b"), "a_.._b");
        assert_eq!(folder_name("Temp (°C)"), "Temp___C_");
    }
}
