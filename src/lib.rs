//! fitaudit: audit the uncertainties of weighted nonlinear least-squares fits.
//!
//! The crate reads as the pipeline it runs:
//!
//! ```text
//! study (TOML + CSV) -> model (formula -> tape with exact derivatives)
//!   -> fit (one refit primitive) -> diagnostics -> report
//! ```
#![warn(missing_docs)]

pub mod audit;
pub mod batch;
pub mod cli_support;
pub mod data;
pub mod demo;
pub mod diagnostics;
pub mod fit;
pub mod model;
pub mod output;
pub mod reduction;
pub mod report;
pub mod rng;
pub mod settings;
pub mod shard;
pub mod study;
pub mod validation;
