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
    /// The data sets of a study with several `[[datasets]]`, in file order,
    /// each a contiguous range of the points; empty for one data set. The
    /// last `x` column then holds each point's data-set index (0, 1, ...),
    /// which the joint model reads, so that resampled copies stay correct.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub groups: Vec<DataGroup>,
}

/// One data set of a joint study: a contiguous range of the joint points.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DataGroup {
    /// The data set's `name`.
    pub name: String,
    /// Its formula.
    pub formula: String,
    /// Its data file as resolved, when read from one.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub file: Option<String>,
    /// SHA-256 (hex) of its data file's bytes, when read from one.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sha256: Option<String>,
    /// Its independent variables, in the order of the joint `x` columns
    /// (column `k` of the joint data holds this data set's `x_names[k]`).
    pub x_names: Vec<String>,
    /// Its response column.
    pub y_name: String,
    /// The parameters its formula uses, in parameter-vector order (a
    /// parameter listed by several data sets is shared).
    pub parameters: Vec<String>,
    /// Index of its first point in the joint data.
    pub start: usize,
    /// Its number of points.
    pub len: usize,
}

impl DataGroup {
    /// The range of its points in the joint data.
    pub fn range(&self) -> std::ops::Range<usize> {
        self.start..self.start + self.len
    }
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
            groups: Vec::new(),
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

    /// The data set (index into `groups`) of each point; all 0 without
    /// groups. Read from the data-set column, so it stays right for
    /// resampled or reduced copies.
    pub fn group_of_points(&self) -> Vec<usize> {
        match (self.groups.is_empty(), self.x.last()) {
            (false, Some(col)) => col.iter().map(|&g| g as usize).collect(),
            _ => vec![0; self.len()],
        }
    }

    /// True when the study supplied sigma (the covariance is then absolute).
    pub fn has_sigma(&self) -> bool {
        self.sigma.is_some()
    }
}
