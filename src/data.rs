//! The data a fit runs on: independent-variable columns, the response and its
//! standard uncertainties.
//!
//! Kept apart from the study loader so that library users (and the
//! diagnostics, which build resampled copies) can construct one directly.

use serde::{Deserialize, Serialize};

/// Observations for one fit: `x` holds one column per independent variable,
/// each as long as `y`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Dataset {
    /// Names of the independent variables, in the order of `x`.
    pub x_names: Vec<String>,
    /// One column per independent variable.
    pub x: Vec<Vec<f64>>,
    /// Name of the response column.
    pub y_name: String,
    /// Observed responses.
    pub y: Vec<f64>,
    /// Standard uncertainty of each response; `None` when the study gives
    /// none (every sigma is then 1 and the covariance is scaled by chi2/dof).
    pub sigma: Option<Vec<f64>>,
    /// Standard uncertainty of the (one) independent variable at each
    /// point (errors in x, `data.sigma_x`); `None` when x is exact.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sigma_x: Option<Vec<f64>>,
}

impl Dataset {
    /// Builds a dataset with a single independent variable.
    pub fn single(x_name: &str, x: Vec<f64>, y_name: &str, y: Vec<f64>, sigma: Option<Vec<f64>>) -> Self {
        Dataset {
            x_names: vec![x_name.to_string()],
            x: vec![x],
            y_name: y_name.to_string(),
            y,
            sigma,
            sigma_x: None,
        }
    }

    /// Number of points.
    pub fn len(&self) -> usize {
        self.y.len()
    }

    /// True when there are no points.
    pub fn is_empty(&self) -> bool {
        self.y.is_empty()
    }

    /// The independent-variable columns as slices, the form the model takes.
    pub fn x_slices(&self) -> Vec<&[f64]> {
        self.x.iter().map(|c| c.as_slice()).collect()
    }

    /// The sigma of every point (1 for every point when none was given).
    pub fn sigma_or_ones(&self) -> Vec<f64> {
        match &self.sigma {
            Some(s) => s.clone(),
            None => vec![1.0; self.len()],
        }
    }

    /// True when the study supplied sigma (the covariance is then absolute).
    pub fn has_sigma(&self) -> bool {
        self.sigma.is_some()
    }
}
