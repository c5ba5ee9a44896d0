//! Pairwise chi-squared contour maps with covariance-ellipse overlays.

use serde::{Deserialize, Serialize};

/// A profiled chi-squared grid: `chi2[r][c]` at `(x[c], y[r])`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ContourGrid {
    /// Abscissae (first parameter of the pair).
    pub x: Vec<f64>,
    /// Ordinates (second parameter).
    pub y: Vec<f64>,
    /// Profiled chi-squared, one row per ordinate (NaN where the refit failed).
    pub chi2: Vec<Vec<f64>>,
}

/// Contour lines at one level.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ContourLine {
    /// Delta chi-squared of the level.
    pub level: f64,
    /// Polylines `[[x, y], ...]`.
    pub paths: Vec<Vec<[f64; 2]>>,
}

/// Contour map of one parameter pair.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ContourResult {
    /// The two parameter names.
    pub pair: [String; 2],
    /// Delta chi-squared levels (2 degrees of freedom).
    pub levels: Vec<f64>,
    /// Confidence level of each level.
    pub level_probabilities: Vec<f64>,
    /// The profiled grid.
    pub grid: ContourGrid,
    /// Contour lines by marching squares.
    pub lines: Vec<ContourLine>,
    /// The covariance ellipse at the same levels.
    pub ellipse: Vec<ContourLine>,
    /// Grid nodes whose refit failed.
    pub failed: usize,
}

use super::{Fitted, Progress};

/// Computes the contour maps (STUB).
pub fn run(ctx: &Fitted, progress: &dyn Progress) -> Vec<ContourResult> {
    let _ = (ctx, progress);
    unimplemented!("contours not built yet")
}
