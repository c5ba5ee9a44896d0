//! results.json: round trip, schema version, non-finite numbers, and
//! docs/RESULTS.md documenting every field.

#[path = "common/fixture.rs"]
mod fixture;

use std::collections::BTreeSet;

use fitaudit::audit::{AuditResults, SCHEMA_VERSION};
use fitaudit::report::json;

#[test]
fn round_trips_to_an_equal_record() {
    for r in [
        fixture::cooling(),
        fixture::hostile(),
        fixture::rebased(),
        fixture::fit_only(),
        fixture::two_variables(),
        fixture::joint(),
    ] {
        let text = json::to_json(&r).unwrap();
        let back: AuditResults = serde_json::from_str(&text).unwrap();
        // Bit-exact: serde_json's float_roundtrip feature reads back the shortest
        // representation it wrote (without it, parsing may be off by one ulp).
        assert!(back == r, "round trip of {} differs", r.study.name);
    }
}

#[test]
fn carries_the_schema_version() {
    let text = json::to_json(&fixture::cooling()).unwrap();
    let v: serde_json::Value = serde_json::from_str(&text).unwrap();
    assert_eq!(v["schema_version"], serde_json::json!(SCHEMA_VERSION));
    assert_eq!(v["study"]["name"], "cooling");
    assert_eq!(
        v["bootstrap"]["estimates"].as_array().unwrap().len(),
        fixture::BOOT
    );
}

#[test]
fn non_finite_numbers_become_null_and_the_file_stays_valid() {
    let r = fixture::with_non_finite();
    let text = json::to_json(&r).unwrap();
    assert!(!text.contains("NaN") && !text.contains("inf"));
    let v: serde_json::Value = serde_json::from_str(&text).expect("valid JSON");
    assert!(v["fit"]["condition_number"].is_null());
    assert!(v["profile"]["parameters"][2]["points"][20][1].is_null());
    assert!(v["profile"]["parameters"][2]["upper"].is_null());
    assert!(v["contours"][0]["grid"]["chi2"][0][0].is_null());
    assert!(v["fit"]["correlation"][0][2].is_null());
    // Finite neighbours are untouched.
    assert_eq!(
        v["fit"]["correlation"][0][0],
        serde_json::json!(r.fit.correlation[0][0])
    );
}

/// Every object key of the record, collected over all nesting levels.
fn keys(v: &serde_json::Value, out: &mut BTreeSet<String>) {
    match v {
        serde_json::Value::Object(m) => {
            for (k, x) in m {
                out.insert(k.clone());
                keys(x, out);
            }
        }
        serde_json::Value::Array(a) => a.iter().for_each(|x| keys(x, out)),
        _ => {}
    }
}

#[test]
fn every_field_is_documented_in_results_md() {
    let doc = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/docs/RESULTS.md")).unwrap();
    let mut all = BTreeSet::new();
    for r in [
        fixture::cooling(),
        fixture::profile_below(),
        fixture::rebased(),
        fixture::joint(),
    ] {
        keys(&serde_json::to_value(r).unwrap(), &mut all);
    }
    assert!(all.len() > 100, "{}", all.len());
    let missing: Vec<&String> = all.iter().filter(|k| !doc.contains(&format!("`{k}`"))).collect();
    assert!(missing.is_empty(), "undocumented fields: {missing:?}");
}
