//! Settings of the diagnostics battery: the `[audit]` table of a study file.
//!
//! Every table rejects unknown keys, so a typo is an error that names the
//! key rather than a setting silently ignored. Defaults are those documented
//! in the README's study-file reference.

use serde::{Deserialize, Serialize};

/// Largest `audit.bootstrap.replicates`, `audit.monte_carlo.replicates`
/// and `--replicates` (checked before anything is allocated).
pub const MAX_REPLICATES: usize = 1_000_000;
/// Largest `audit.multistart.starts` and `--starts`.
pub const MAX_STARTS: usize = 100_000;
/// Largest `audit.multistart.max_starts`.
pub const MAX_TOTAL_STARTS: usize = 1_000_000;
/// Largest `audit.profile.points`.
pub const MAX_PROFILE_POINTS: usize = 2001;
/// Largest `audit.contours.grid` (nodes per axis; a map has grid^2 nodes).
pub const MAX_CONTOUR_GRID: usize = 201;
/// Most `audit.contours.pairs`.
pub const MAX_CONTOUR_PAIRS: usize = 100;
/// Smallest `audit.level`.
pub const MIN_LEVEL: f64 = 0.001;
/// Largest `audit.level`.
pub const MAX_LEVEL: f64 = 0.9999;

/// Reads `audit.contours.pairs`, insisting on exactly two names per pair
/// (a plain two-element array would drop a third name silently).
fn exact_pairs<'de, D>(d: D) -> Result<Option<Vec<[String; 2]>>, D::Error>
where
    D: serde::Deserializer<'de>,
{
    use serde::de::Error;
    let raw: Option<Vec<Vec<String>>> = Option::deserialize(d)?;
    let Some(raw) = raw else {
        return Ok(None);
    };
    let mut out = Vec::with_capacity(raw.len().min(MAX_CONTOUR_PAIRS + 1));
    for (i, pair) in raw.into_iter().enumerate() {
        match <[String; 2]>::try_from(pair) {
            Ok(p) => out.push(p),
            Err(p) => {
                return Err(D::Error::custom(format!(
                    "contour pair {} names {} parameter(s); a pair names exactly two",
                    i + 1,
                    p.len()
                )))
            }
        }
    }
    Ok(Some(out))
}

/// The `[audit]` table.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct AuditSettings {
    /// Seed of every random stream.
    pub seed: u64,
    /// Confidence level of every interval (0 < level < 1).
    pub level: f64,
    /// Bootstrap settings.
    pub bootstrap: BootstrapSettings,
    /// Monte Carlo settings.
    pub monte_carlo: MonteCarloSettings,
    /// Profile settings.
    pub profile: ProfileSettings,
    /// Contour-map settings.
    pub contours: ContourSettings,
    /// Multi-start settings.
    pub multistart: MultistartSettings,
    /// Coverage-simulation settings.
    pub coverage: CoverageSettings,
    /// Relative tolerance below which a disagreement between a resampled and
    /// the analytic uncertainty does not count (0.2 = 20 %).
    pub tolerance: f64,
}

impl Default for AuditSettings {
    fn default() -> Self {
        AuditSettings {
            seed: 1,
            level: 0.6827,
            bootstrap: BootstrapSettings::default(),
            monte_carlo: MonteCarloSettings::default(),
            profile: ProfileSettings::default(),
            contours: ContourSettings::default(),
            multistart: MultistartSettings::default(),
            coverage: CoverageSettings::default(),
            tolerance: 0.2,
        }
    }
}

/// Bootstrap resampling scheme.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum BootstrapScheme {
    /// Resample (x, y, sigma) points with replacement.
    Case,
    /// Fitted values plus resampled leverage-adjusted weighted residuals.
    #[default]
    Residual,
    /// Residuals multiplied by random weights (heteroscedastic data).
    Wild,
}

/// Multipliers of the wild bootstrap.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum WildWeights {
    /// +1 or -1 with equal probability.
    #[default]
    Rademacher,
    /// Mammen's two-point distribution.
    Mammen,
}

/// `[audit] bootstrap = {...}`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct BootstrapSettings {
    /// Number of replicates.
    pub replicates: usize,
    /// Resampling scheme.
    pub scheme: BootstrapScheme,
    /// Multipliers of the wild scheme.
    pub weights: WildWeights,
}

impl Default for BootstrapSettings {
    fn default() -> Self {
        BootstrapSettings {
            replicates: 2000,
            scheme: BootstrapScheme::Residual,
            weights: WildWeights::Rademacher,
        }
    }
}

/// `[audit] monte_carlo = {...}`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct MonteCarloSettings {
    /// Number of trials (the maximum when `adaptive`).
    pub replicates: usize,
    /// Degrees of freedom of Student-t noise; normal noise when absent.
    pub student_t_dof: Option<f64>,
    /// Add trials until the standard uncertainties are stable (JCGM 101:2008, 7.9).
    pub adaptive: bool,
    /// Numerical tolerance of the adaptive stopping rule, relative to each
    /// standard uncertainty.
    pub adaptive_tolerance: f64,
}

impl Default for MonteCarloSettings {
    fn default() -> Self {
        MonteCarloSettings {
            replicates: 2000,
            student_t_dof: None,
            adaptive: false,
            adaptive_tolerance: 0.02,
        }
    }
}

/// `[audit] profile = {...}`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct ProfileSettings {
    /// Grid points per profile.
    pub points: usize,
}

impl Default for ProfileSettings {
    fn default() -> Self {
        ProfileSettings { points: 41 }
    }
}

/// `[audit] contours = {...}`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct ContourSettings {
    /// Grid nodes per axis.
    pub grid: usize,
    /// Pairs to map; default all pairs up to 5 free parameters, else the 6
    /// most correlated.
    #[serde(deserialize_with = "exact_pairs")]
    pub pairs: Option<Vec<[String; 2]>>,
}

impl Default for ContourSettings {
    fn default() -> Self {
        ContourSettings {
            grid: 41,
            pairs: None,
        }
    }
}

/// `[audit] multistart = {...}`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct MultistartSettings {
    /// Starts of the first batch (and of every later batch).
    pub starts: usize,
    /// Sample positive parameters whose box spans more than a decade
    /// log-uniformly.
    pub log_uniform: bool,
    /// Cap on the starts of all batches together (never below `starts`);
    /// batches are added while the estimated probability of a missed
    /// minimum exceeds `missed_target` and another whole batch fits under
    /// the cap.
    pub max_starts: usize,
    /// Estimated probability of a missed minimum (Boender & Rinnooy Kan)
    /// at which the search stops adding batches (0 < target < 1).
    pub missed_target: f64,
    /// Polish every start of a later batch for a few iterations first and
    /// count it for a minimum already found when it has reached it, without
    /// finishing its refit.
    pub merge_early: bool,
    /// Audit at the best minimum when the search finds a clearly better one
    /// than the study's start reaches (the search then runs first).
    pub rebase: bool,
}

impl Default for MultistartSettings {
    fn default() -> Self {
        MultistartSettings {
            starts: 128,
            log_uniform: true,
            max_starts: 1024,
            missed_target: 0.05,
            merge_early: false,
            rebase: true,
        }
    }
}

/// `[audit] coverage = {...}`: the coverage simulation of the study's own
/// intervals (data sets drawn at the fitted values with the study's error
/// model, each refitted and its intervals recomputed).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct CoverageSettings {
    /// Simulated data sets (each costs one refit plus a profile crossing
    /// search per free parameter).
    pub replicates: usize,
    /// Run it in the default battery (when `--only` is not given); it is
    /// not part of the default battery otherwise.
    pub enabled: bool,
    /// Degrees of freedom of Student-t noise; normal noise when absent.
    /// Absent here, the Monte Carlo's `student_t_dof` is used, so both
    /// simulations share one error model.
    pub student_t_dof: Option<f64>,
}

impl Default for CoverageSettings {
    fn default() -> Self {
        CoverageSettings {
            replicates: 1000,
            enabled: false,
            student_t_dof: None,
        }
    }
}

/// Which diagnostics an audit runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Diagnostic {
    /// Bootstrap resampling.
    Bootstrap,
    /// Monte Carlo refits.
    MonteCarlo,
    /// Chi-squared profiles.
    Profile,
    /// Pairwise contour maps.
    Contours,
    /// Multi-start search.
    Multistart,
    /// Coverage of the study's own intervals, simulated at the fit.
    Coverage,
}

impl Diagnostic {
    /// The default battery, in run order (every diagnostic but the
    /// coverage simulation, which is opt-in: see [`Diagnostic::SELECTABLE`]
    /// and [`AuditSettings::battery`]).
    pub const ALL: [Diagnostic; 5] = [
        Diagnostic::Bootstrap,
        Diagnostic::MonteCarlo,
        Diagnostic::Profile,
        Diagnostic::Contours,
        Diagnostic::Multistart,
    ];

    /// The name used on the command line (`--only`).
    pub fn cli_name(self) -> &'static str {
        match self {
            Diagnostic::Bootstrap => "bootstrap",
            Diagnostic::MonteCarlo => "monte-carlo",
            Diagnostic::Profile => "profile",
            Diagnostic::Contours => "contours",
            Diagnostic::Multistart => "multistart",
            Diagnostic::Coverage => "coverage",
        }
    }

    /// Every diagnostic `--only` accepts: the default battery and the
    /// coverage simulation.
    pub const SELECTABLE: [Diagnostic; 6] = [
        Diagnostic::Bootstrap,
        Diagnostic::MonteCarlo,
        Diagnostic::Profile,
        Diagnostic::Contours,
        Diagnostic::Multistart,
        Diagnostic::Coverage,
    ];
}

impl AuditSettings {
    /// The diagnostics run when `--only` is not given: [`Diagnostic::ALL`],
    /// plus the coverage simulation when `coverage.enabled`.
    pub fn battery(&self) -> Vec<Diagnostic> {
        let mut v = Diagnostic::ALL.to_vec();
        if self.coverage.enabled {
            v.push(Diagnostic::Coverage);
        }
        v
    }

    /// Checks value ranges; returns the offending key and why.
    pub fn validate(&self) -> Result<(), (String, String)> {
        let bad = |k: &str, why: &str| Err((k.to_string(), why.to_string()));
        let at_most = |k: &str, v: usize, max: usize| {
            if v > max {
                Err((
                    k.to_string(),
                    format!("is {v}, more than the largest allowed, {max}"),
                ))
            } else {
                Ok(())
            }
        };
        if !(self.level >= MIN_LEVEL && self.level <= MAX_LEVEL) {
            return bad(
                "audit.level",
                &format!("must lie between {MIN_LEVEL} and {MAX_LEVEL} (e.g. 0.6827 or 0.95)"),
            );
        }
        if self.bootstrap.replicates < 2 {
            return bad("audit.bootstrap.replicates", "must be at least 2");
        }
        at_most(
            "audit.bootstrap.replicates",
            self.bootstrap.replicates,
            MAX_REPLICATES,
        )?;
        if self.monte_carlo.replicates < 2 {
            return bad("audit.monte_carlo.replicates", "must be at least 2");
        }
        at_most(
            "audit.monte_carlo.replicates",
            self.monte_carlo.replicates,
            MAX_REPLICATES,
        )?;
        at_most("audit.profile.points", self.profile.points, MAX_PROFILE_POINTS)?;
        at_most("audit.contours.grid", self.contours.grid, MAX_CONTOUR_GRID)?;
        at_most("audit.multistart.starts", self.multistart.starts, MAX_STARTS)?;
        at_most(
            "audit.multistart.max_starts",
            self.multistart.max_starts,
            MAX_TOTAL_STARTS,
        )?;
        if let Some(pairs) = &self.contours.pairs {
            at_most("audit.contours.pairs", pairs.len(), MAX_CONTOUR_PAIRS)?;
        }
        if let Some(nu) = self.monte_carlo.student_t_dof {
            if !(nu.is_finite() && nu > 2.0) {
                return bad(
                    "audit.monte_carlo.student_t_dof",
                    "must be a number greater than 2 (the variance must exist)",
                );
            }
        }
        if !(self.monte_carlo.adaptive_tolerance > 0.0 && self.monte_carlo.adaptive_tolerance < 1.0) {
            return bad(
                "audit.monte_carlo.adaptive_tolerance",
                "must lie strictly between 0 and 1",
            );
        }
        if self.coverage.replicates < 2 {
            return bad("audit.coverage.replicates", "must be at least 2");
        }
        if let Some(nu) = self.coverage.student_t_dof {
            if !(nu.is_finite() && nu > 2.0) {
                return bad(
                    "audit.coverage.student_t_dof",
                    "must be a number greater than 2 (the variance must exist)",
                );
            }
        }
        if self.profile.points < 5 {
            return bad("audit.profile.points", "must be at least 5");
        }
        if self.contours.grid < 5 {
            return bad("audit.contours.grid", "must be at least 5");
        }
        if self.multistart.starts < 2 {
            return bad("audit.multistart.starts", "must be at least 2");
        }
        if !(self.multistart.missed_target > 0.0 && self.multistart.missed_target < 1.0) {
            return bad(
                "audit.multistart.missed_target",
                "must lie strictly between 0 and 1",
            );
        }
        if !(self.tolerance >= 0.0 && self.tolerance.is_finite()) {
            return bad("audit.tolerance", "must be a non-negative number");
        }
        Ok(())
    }
}
