//! Regenerates the demo scenarios in `demo-data/` reproducibly.
//!
//! The data are invented for the demonstration: each scenario draws its
//! noise from a fixed seed, so running this example again rewrites the same
//! bytes (a test checks that). Run with
//! `cargo run --example generate_demo_data`.

use std::fmt::Write as _;
use std::path::Path;

use fitaudit::demo::scenarios_csv;

fn main() -> std::io::Result<()> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data");
    std::fs::create_dir_all(&dir)?;
    let mut listing = String::new();
    for (file, text) in scenarios_csv() {
        std::fs::write(dir.join(&file), text)?;
        let _ = writeln!(listing, "wrote demo-data/{file}");
    }
    print!("{listing}");
    Ok(())
}
