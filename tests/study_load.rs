//! Study files that load: parameters, columns, sigma, aliases, settings,
//! and one study built on a NIST StRD reference data set.

mod study_common;

use fitaudit::data::Dataset;
use fitaudit::fit::{CovarianceScaling, Method};
use fitaudit::model::ModelFn;
use fitaudit::settings::BootstrapScheme;
use fitaudit::study::{self, ParamEntry, Study, StudySpec, StudyWarning};
use study_common::*;

#[test]
fn the_base_study_loads_with_its_parameters_columns_and_sigma() {
    let (c, r) = load(STUDY, CSV);
    let s = r.unwrap();
    assert_eq!(s.name, "study");
    assert_eq!(s.path, c.study);
    assert_eq!(s.title.as_deref(), Some("Cooling of a sealed vial"));
    assert_eq!(s.data_file.as_deref(), Some(c.data.as_path()));
    assert_eq!(s.formula, "T_env + dT*exp(-t/tau)");
    // Parameters in file order with their starts and bounds.
    let names: Vec<&str> = s.parameters.iter().map(|p| p.name.as_str()).collect();
    assert_eq!(names, ["T_env", "dT", "tau"]);
    assert_eq!(s.parameters[0].start, 20.0);
    assert_eq!(s.parameters[0].min, f64::NEG_INFINITY);
    assert_eq!(s.parameters[0].max, f64::INFINITY);
    assert_eq!((s.parameters[1].start, s.parameters[1].min), (50.0, 0.0));
    assert_eq!((s.parameters[2].min, s.parameters[2].max), (1.0, 1e5));
    assert!(s.parameters.iter().all(|p| !p.fixed));
    // Columns and sigma exactly as in the file.
    assert_eq!(s.dataset.x_names, ["t"]);
    assert_eq!(s.dataset.x, vec![vec![0.0, 100.0, 200.0, 300.0, 600.0]]);
    assert_eq!(s.dataset.y_name, "temp");
    assert_eq!(s.dataset.y, vec![70.1, 58.2, 49.9, 44.3, 34.6]);
    assert_eq!(s.dataset.sigma, Some(vec![0.2, 0.2, 0.3, 0.2, 0.25]));
    assert_eq!(s.data_lines, Some(vec![3, 4, 5, 6, 7]));
    assert_eq!(s.audit.seed, 7);
    assert_eq!(s.audit.level, 0.6827); // default of settings.rs
    assert!(s.warnings.is_empty());
    // Hashes of the bytes as written: 64 hex digits, and different files differ.
    let h = s.study_sha256.clone().unwrap();
    assert_eq!(h.len(), 64);
    assert!(h.chars().all(|c| c.is_ascii_hexdigit()));
    assert_ne!(s.data_sha256, s.study_sha256);
    // The compiled model evaluates the formula (identity check at the starts).
    let p = s.problem();
    assert_eq!(p.params.len(), 3);
    let mut v = vec![0.0; 5];
    p.model
        .eval(
            &[20.0, 50.0, 300.0],
            &s.dataset.x_slices(),
            &mut v,
            None,
            &mut Vec::new(),
        )
        .unwrap();
    let want = 20.0 + 50.0 * (-100.0f64 / 300.0).exp();
    assert!((v[1] - want).abs() < 1e-12);
}

#[test]
fn data_sha256_is_the_hash_of_the_data_file_bytes() {
    let (c, r) = load(STUDY, CSV);
    let s = r.unwrap();
    use sha2::{Digest, Sha256};
    let hex = |b: &[u8]| -> String { Sha256::digest(b).iter().map(|b| format!("{b:02x}")).collect() };
    assert_eq!(s.data_sha256, Some(hex(&std::fs::read(&c.data).unwrap())));
    assert_eq!(s.study_sha256, Some(hex(STUDY.as_bytes())));
}

#[test]
fn parameter_order_follows_the_file_not_the_alphabet() {
    let text = STUDY.replace(
        "T_env = { start = 20.0 }\ndT = { start = 50.0, min = 0 }\ntau = { start = 300, min = 1, max = 1e5 }",
        "tau = { start = 300, min = 1, max = 1e5 }\n[parameters.dT]\nstart = 50.0\nmin = 0\nfixed = true\n[parameters.T_env]\nstart = 20",
    );
    let (_c, r) = load(&text, CSV);
    let s = r.unwrap();
    let names: Vec<&str> = s.parameters.iter().map(|p| p.name.as_str()).collect();
    assert_eq!(names, ["tau", "dT", "T_env"]);
    assert!(s.parameters[1].fixed);
    assert_eq!(s.free_parameters(), 2);
}

#[test]
fn semicolon_tab_bom_crlf_quotes_and_aliases() {
    let text = STUDY
        .replace(
            "y = \"temp\"",
            "y = \"T\"\ncolumns = { T = \"Temp (°C)\", u = \"u(T) / K\" }",
        )
        .replace("x = \"t\"", "x = \"time\"")
        .replace("exp(-t/tau)", "exp(-time/tau)");
    let csv = "\u{feff}# exported\r\n time ; \"Temp (°C)\" ; \"u(T) / K\"\r\n\r\n0;70.1;0.2\r\n 100 ; 58.2 ; 0.2\r\n# pause\r\n200;49.9;0.3\r\n300;44.3;0.2\r\n600;34.6;0.25\r\n";
    let (_c, r) = load(&text, csv);
    let s = r.unwrap();
    assert_eq!(s.dataset.x_names, ["time"]);
    assert_eq!(s.dataset.y_name, "T");
    assert_eq!(s.dataset.y, vec![70.1, 58.2, 49.9, 44.3, 34.6]);
    assert_eq!(s.dataset.sigma, Some(vec![0.2, 0.2, 0.3, 0.2, 0.25]));
    assert_eq!(s.data_lines, Some(vec![4, 5, 7, 8, 9]));

    let tsv = CSV.replace(',', "\t");
    let (_c, r) = load(STUDY, &tsv);
    assert_eq!(r.unwrap().dataset.x[0], vec![0.0, 100.0, 200.0, 300.0, 600.0]);
}

#[test]
fn sigma_as_one_number_none_and_settings_tables() {
    let text = STUDY.replace("sigma = \"u\"", "sigma = 0.5").replace(
        "seed = 7",
        "seed = 9\nlevel = 0.95\nbootstrap = { replicates = 500, scheme = \"wild\" }\n[fit]\nmethod = \"steepest\"\nscale_covariance = true\nmax_iterations = 50\ngeodesic = true\n[constants]\nT0 = 273.15",
    );
    let (_c, r) = load(&text, CSV);
    let s = r.unwrap();
    assert_eq!(s.dataset.sigma, Some(vec![0.5; 5]));
    assert_eq!(s.audit.seed, 9);
    assert_eq!(s.audit.level, 0.95);
    assert_eq!(s.audit.bootstrap.replicates, 500);
    assert_eq!(s.audit.bootstrap.scheme, BootstrapScheme::Wild);
    assert_eq!(s.fit_options.method, Method::Steepest);
    assert_eq!(s.fit_options.covariance, CovarianceScaling::Scaled);
    assert_eq!(s.fit_options.max_iterations, 50);
    assert!(s.fit_options.geodesic);
    assert_eq!(s.constants, vec![("T0".to_string(), 273.15)]);

    let text = STUDY.replace("sigma = \"u\"\n", "");
    let (_c, r) = load(&text, CSV);
    let s = r.unwrap();
    assert_eq!(s.dataset.sigma, None);
    assert_eq!(s.fit_options.covariance, CovarianceScaling::Auto);
}

#[test]
fn two_x_columns_constants_and_an_unused_text_column() {
    let text = STUDY
        .replace("x = \"t\"", "x = [\"t\", \"p\"]")
        .replace("exp(-t/tau)", "exp(-t/tau) + k*p")
        .replace("[audit]", "[constants]\nk = 0.001\n[audit]");
    let csv = "t,p,temp,u,note\n0,1,70.1,0.2,start\n100,1,58.2,0.2,\n200,2,49.9,0.3,x\n300,2,44.3,0.2,x\n600,1,34.6,0.25,end\n";
    let (_c, r) = load(&text, csv);
    let s = r.unwrap();
    assert_eq!(s.dataset.x_names, ["t", "p"]);
    assert_eq!(s.dataset.x[1], vec![1.0, 1.0, 2.0, 2.0, 1.0]);
    assert_eq!(s.constants, vec![("k".to_string(), 0.001)]);
}

#[test]
fn one_constant_x_column_among_varying_ones_is_a_warning() {
    let text = STUDY
        .replace("x = \"t\"", "x = [\"t\", \"p\"]")
        .replace("exp(-t/tau)", "exp(-t/tau)*p");
    let csv = "t,p,temp,u\n0,1,70.1,0.2\n100,1,58.2,0.2\n200,1,49.9,0.3\n300,1,44.3,0.2\n";
    let (_c, r) = load(&text, csv);
    let s = r.unwrap();
    assert_eq!(
        s.warnings,
        vec![StudyWarning::ConstantXColumn {
            column: "p".to_string()
        }]
    );
}

#[test]
fn an_absolute_data_path_is_read() {
    let c = case_bytes("", CSV.as_bytes());
    let abs = c.data.to_string_lossy().replace('\\', "/");
    let text = STUDY.replace("file = \"cooling.csv\"", &format!("file = '{abs}'"));
    let other = tempfile::tempdir().unwrap();
    let study = other.path().join("elsewhere.toml");
    std::fs::write(&study, text).unwrap();
    let s = study::load(&study).unwrap();
    assert_eq!(s.name, "elsewhere");
    assert_eq!(s.dataset.len(), 5);
}

#[test]
fn a_programmatic_study_needs_no_csv() {
    let spec = StudySpec::new(
        "a + b*x",
        vec![
            ("a".into(), ParamEntry::start(0.0)),
            ("b".into(), ParamEntry::start(1.0)),
        ],
    );
    let ds = Dataset::single("x", vec![1.0, 2.0, 3.0], "y", vec![2.0, 4.1, 5.9], None);
    let s = Study::from_dataset(spec, ds.clone(), "line").unwrap();
    assert_eq!(s.name, "line");
    assert_eq!(s.dataset, ds);
    assert_eq!(s.data_file, None);
    assert_eq!(s.data_sha256, None);
    assert_eq!(s.parameters.len(), 2);
}

#[test]
fn from_spec_reads_the_csv_relative_to_base_dir() {
    let c = case_bytes(STUDY, CSV.as_bytes());
    let spec = StudySpec::from_toml_str(STUDY, &c.study).unwrap();
    let s = Study::from_spec(spec, c.dir.path(), "mine").unwrap();
    assert_eq!(s.name, "mine");
    assert_eq!(s.dataset.y.len(), 5);
}

/// Reads the data block of a NIST StRD file: (y, x) pairs.
fn nist_pairs(text: &str) -> Vec<(f64, f64)> {
    let mut out = Vec::new();
    let mut in_data = false;
    for line in text.lines() {
        if line.trim_start().starts_with("Data:") && line.contains('y') && line.contains('x') {
            in_data = true;
            continue;
        }
        if in_data {
            let v: Vec<f64> = line.split_whitespace().filter_map(|t| t.parse().ok()).collect();
            if v.len() == 2 {
                out.push((v[0], v[1]));
            }
        }
    }
    out
}

#[test]
fn nist_misra1a_as_a_study_loads_the_reference_data() {
    // FITAUDIT_NIST_DIR, else ../shared/... of the project root (also tried
    // one level further up, for a checkout inside a worktree folder).
    let root = std::path::PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    let dir = match std::env::var("FITAUDIT_NIST_DIR") {
        Ok(d) => std::path::PathBuf::from(d),
        Err(_) => ["..", "../.."]
            .iter()
            .map(|up| root.join(up).join("shared/reference/nist-strd-nls"))
            .find(|d| d.is_dir())
            .unwrap_or_else(|| root.join("../shared/reference/nist-strd-nls")),
    };
    let file = dir.join("Misra1a.dat");
    let text = match std::fs::read_to_string(&file) {
        Ok(t) => t,
        Err(e) => {
            if std::env::var("CI").as_deref() == Ok("true") {
                panic!("NIST StRD Misra1a not found at {}: {e}", file.display());
            }
            eprintln!("skipped: NIST StRD Misra1a not found at {} ({e})", file.display());
            return;
        }
    };
    let pairs = nist_pairs(&text);
    // NIST StRD Misra1a: 14 observations.
    assert_eq!(pairs.len(), 14);
    let mut csv = String::from("pressure,volume\n");
    for (y, x) in &pairs {
        csv.push_str(&format!("{x:e},{y:e}\n"));
    }
    // NIST StRD Misra1a model y = b1*(1-exp(-b2*x)), Start 1: b1 = 500, b2 = 1e-4.
    let study = "[data]\nfile = \"cooling.csv\"\nx = \"pressure\"\ny = \"volume\"\n[model]\nformula = \"b1*(1-exp(-b2*pressure))\"\n[parameters]\nb1 = { start = 500 }\nb2 = { start = 0.0001 }\n";
    let (_c, r) = load(study, &csv);
    let s = r.unwrap();
    // NIST StRD Misra1a, first observation: y = 10.07, x = 77.6; last: y = 65.17 (from the file, read above).
    assert_eq!(s.dataset.x[0][0], 77.6);
    assert_eq!(s.dataset.y[0], 10.07);
    assert_eq!(s.dataset.y, pairs.iter().map(|p| p.0).collect::<Vec<_>>());
    assert_eq!(s.dataset.x[0], pairs.iter().map(|p| p.1).collect::<Vec<_>>());
    assert_eq!(s.dataset.sigma, None);
    let mut v = vec![0.0; 14];
    let mut j = vec![0.0; 28];
    s.model
        .eval(
            &[500.0, 1e-4],
            &s.dataset.x_slices(),
            &mut v,
            Some(&mut j),
            &mut Vec::new(),
        )
        .unwrap();
    let e = (-1e-4f64 * 77.6).exp();
    assert!((v[0] - 500.0 * (1.0 - e)).abs() < 1e-12);
    assert!((j[14] - 500.0 * 77.6 * e).abs() < 1e-9);

    // End to end: the study's problem fitted from NIST Start 1 reaches the
    // NIST StRD Misra1a certified values (no sigma: scaled covariance).
    let r = fitaudit::fit::fit(&s.problem(), &s.dataset).unwrap();
    assert!(r.converged);
    let close = |got: f64, want: f64| (got - want).abs() <= 1e-6 * want.abs();
    // NIST StRD Misra1a certified values.
    assert!(
        close(r.parameters[0].value, 2.3894212918e2),
        "{}",
        r.parameters[0].value
    );
    assert!(
        close(r.parameters[1].value, 5.5015643181e-4),
        "{}",
        r.parameters[1].value
    );
    assert!(close(r.parameters[0].std_error.unwrap(), 2.7070075241e0));
    assert!(close(r.parameters[1].std_error.unwrap(), 7.2668688436e-6));
    assert!(close(r.chi2, 1.2455138894e-1), "{}", r.chi2);
}

#[test]
fn a_model_without_x_columns_is_a_weighted_mean() {
    // y = mu with sigma: the weighted mean (common practice); x = [] names no column.
    let text = "[data]\nfile = \"cooling.csv\"\nx = []\ny = \"temp\"\nsigma = \"u\"\n[model]\nformula = \"mu\"\n[parameters]\nmu = { start = 50 }\n";
    let (_c, r) = load(text, CSV);
    let s = r.unwrap();
    assert!(s.dataset.x.is_empty());
    let f = fitaudit::fit::fit(&s.problem(), &s.dataset).unwrap();
    // Weighted mean sum(y/s^2)/sum(1/s^2), computed here from the same numbers.
    let (y, u) = (&s.dataset.y, s.dataset.sigma.as_ref().unwrap());
    let w: f64 = u.iter().map(|s| 1.0 / (s * s)).sum();
    let m: f64 = y.iter().zip(u).map(|(y, s)| y / (s * s)).sum::<f64>() / w;
    assert!((f.parameters[0].value - m).abs() < 1e-9 * m.abs());
}

#[test]
fn read_csv_reads_every_column_as_numbers() {
    let c = case_bytes("", CSV.as_bytes());
    let t = study::read_csv(&c.data).unwrap();
    assert_eq!(t.headers, ["t", "temp", "u"]);
    assert_eq!(t.column("u"), Some(&[0.2, 0.2, 0.3, 0.2, 0.25][..]));
    assert_eq!(t.lines, vec![3, 4, 5, 6, 7]);
    // Unlike a study, which reads only the columns it uses, read_csv wants all numeric.
    std::fs::write(&c.data, "t,note\n1,a\n").unwrap();
    let e = study::read_csv(&c.data).unwrap_err().to_string();
    has(
        &e,
        &[
            "cooling.csv, line 2, column 2",
            "`a` in column 2 (`note`) is not a number",
        ],
    );
}

#[test]
fn a_spec_written_back_as_toml_reads_the_same() {
    let text = format!(
        "{STUDY}bootstrap = {{ replicates = 300 }}\n[fit]\nmethod = \"steepest\"\n[constants]\nk = 2.5\n"
    );
    let a = StudySpec::from_toml_str(&text, std::path::Path::new("a.toml")).unwrap();
    let written = toml::to_string(&a).unwrap();
    let b = StudySpec::from_toml_str(&written, std::path::Path::new("a.toml")).unwrap();
    assert_eq!(a.title, b.title);
    assert_eq!(a.data, b.data);
    assert_eq!(a.model, b.model);
    assert_eq!(a.parameters, b.parameters);
    assert_eq!(a.constants, b.constants);
    assert_eq!(a.audit, b.audit);
    assert_eq!(a.fit, b.fit);
}
