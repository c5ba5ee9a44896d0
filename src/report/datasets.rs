//! The data-set table of a study of several `[[datasets]]`: each data set's
//! points, chi-squared contribution and share of the degrees of freedom,
//! for the HTML page and summary.md.

use crate::audit::{AuditResults, DatasetShare};
use crate::report::format;
use crate::report::tables::Table;

/// The sentence under the data-set table.
pub const NOTE: &str = "One joint fit: every parameter listed once, a parameter used by several \
formulas (marked *) shared. The chi2 contributions add up to the joint chi2 and the dof shares to the \
joint degrees of freedom (each free parameter counts 1/k towards each of the k data sets using it). A \
contribution per dof share far from the joint value means the data sets disagree with the model or \
with their sigma: look at that data set's fit figure before quoting the shared parameters. In a Poisson \
fit the contributions are those of the deviance.";

/// Name, formula, points, parameters (shared ones starred), chi2, share
/// of the joint chi2, dof share and chi2 per dof share; one row per data
/// set (no rows for a study of one data set).
pub fn table(results: &AuditResults) -> Table {
    let poisson = results.fit.likelihood == crate::fit::Likelihood::Poisson;
    table_for(&results.datasets, results.fit.sigma_given, poisson)
}

/// [`table`] from the shares themselves (for `fitaudit fit`).
pub fn table_of(shares: &[DatasetShare], sigma: bool) -> Table {
    table_for(shares, sigma, false)
}

/// [`table_of`] naming the statistic: with `poisson` the contributions are
/// those of the deviance (a Poisson fit), headed so.
pub fn table_for(shares: &[DatasetShare], sigma: bool, poisson: bool) -> Table {
    let (stat, per) = if poisson {
        ("Deviance", "Deviance / dof share")
    } else if sigma {
        ("chi2", "chi2 / dof share")
    } else {
        ("Sum of squares", "Sum / dof share")
    };
    Table {
        header: vec![
            "Data set".into(),
            "Formula".into(),
            "Points".into(),
            "Parameters".into(),
            stat.into(),
            "Share of total".into(),
            "dof share".into(),
            per.into(),
        ],
        rows: shares
            .iter()
            .map(|d| {
                let params = d
                    .parameters
                    .iter()
                    .map(|p| {
                        if d.shared.contains(p) {
                            format!("{p}*")
                        } else {
                            p.clone()
                        }
                    })
                    .collect::<Vec<_>>()
                    .join(", ");
                vec![
                    d.name.clone(),
                    d.formula.clone(),
                    d.points.to_string(),
                    params,
                    format::chi2(d.chi2),
                    format::percent(d.chi2_fraction, 3),
                    format::sig(d.dof_share, 4),
                    format::opt_sig(d.reduced_chi2, 4),
                ]
            })
            .collect(),
    }
}
