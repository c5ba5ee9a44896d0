//! Shared test fixtures.
#![allow(dead_code)]
pub mod fixture;
