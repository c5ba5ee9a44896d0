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
            || cause.is::<crate::demo::DemoError>()
        {
            return 2;
        }
        if cause.is::<crate::output::OutputError>() {
            return 2;
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

/// A progress bar on stderr when stderr is a terminal and not `--quiet`.
pub struct TerminalProgress {
    bar: Mutex<Option<ProgressBar>>,
    enabled: bool,
}

impl TerminalProgress {
    /// A progress reporter; silent when `quiet` or when stderr is not a terminal.
    pub fn new(quiet: bool) -> Self {
        TerminalProgress {
            bar: Mutex::new(None),
            enabled: !quiet && std::io::stderr().is_terminal(),
        }
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

/// What `fitaudit check` prints: what was read, and any warnings.
pub fn check_summary(study: &crate::study::Study) -> String {
    use std::fmt::Write as _;
    let mut s = String::new();
    let d = &study.dataset;
    let _ = writeln!(s, "study      {}", study.path.display());
    if let Some(t) = &study.title {
        let _ = writeln!(s, "title      {t}");
    }
    if let Some(f) = &study.data_file {
        let _ = writeln!(s, "data       {} ({} points)", f.display(), d.len());
    } else {
        let _ = writeln!(s, "data       {} points", d.len());
    }
    let _ = writeln!(s, "x          {}", d.x_names.join(", "));
    let _ = writeln!(s, "y          {}", d.y_name);
    let _ = writeln!(
        s,
        "sigma      {}",
        if study.fit_options.likelihood == crate::fit::Likelihood::Poisson {
            "none: y holds counts (Poisson likelihood, absolute covariance)"
        } else if d.has_sigma() {
            "given (absolute covariance)"
        } else {
            "none (covariance scaled by chi2/dof)"
        }
    );
    if d.sigma_x.is_some() {
        let _ = writeln!(s, "sigma_x    given (errors in x: effective variance)");
    }
    let _ = writeln!(s, "formula    {}", study.formula);
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
        "audit      seed {}, level {}, bootstrap {} ({:?}), Monte Carlo {}, profile {} points, contour grid {}, {} starts",
        a.seed,
        a.level,
        a.bootstrap.replicates,
        a.bootstrap.scheme,
        a.monte_carlo.replicates,
        a.profile.points,
        a.contours.grid,
        a.multistart.starts
    );
    for w in &study.warnings {
        let _ = writeln!(s, "warning    {w}");
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
    fn folder_names_cannot_escape() {
        assert_eq!(folder_name("cooling"), "cooling");
        assert_eq!(folder_name(".."), "study");
        assert_eq!(folder_name("."), "study");
        assert_eq!(folder_name(""), "study");
        assert_eq!(folder_name("a/../b"), "a_.._b");
        assert_eq!(folder_name("Temp (°C)"), "Temp___C_");
    }
}
