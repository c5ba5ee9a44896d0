//! The bad-input catalogue: a table of malformed study files, data files,
//! formulas and command-line flags. Each case asserts the exit status, that
//! the message names the culprit, and that no output folder is left behind.
//! Cases that must work (a byte-order mark, Windows line ends, many columns)
//! assert success. The expectations are the tool's own contract (README,
//! "Exit status" and "Study file"); no outside source applies.

use std::path::{Path, PathBuf};

use assert_cmd::Command;

const STUDY: &str = r#"title = "catalogue base"
[data]
file = "d.csv"
x = "t"
y = "y"
sigma = "u"

[model]
formula = "a + b*exp(-t/tau)"

[parameters]
a = { start = 1.0 }
b = { start = 4.0 }
tau = { start = 2.0, min = 0.01, max = 100 }

[audit]
bootstrap = { replicates = 20 }
monte_carlo = { replicates = 20 }
multistart = { starts = 8 }
profile = { points = 11 }
contours = { grid = 7 }
"#;

/// The base study as two data sets (both read `d.csv`) sharing `b` and `tau`.
const JOINT: &str = r#"title = "joint catalogue base"
[[datasets]]
name = "A"
file = "d.csv"
x = "t"
y = "y"
sigma = "u"
formula = "a + b*exp(-t/tau)"

[[datasets]]
name = "B"
file = "d.csv"
x = "t"
y = "y"
sigma = "u"
formula = "a2 + b*exp(-t/tau)"

[parameters]
a = { start = 1.0 }
a2 = { start = 1.0 }
b = { start = 4.0 }
tau = { start = 2.0, min = 0.01, max = 100 }

[audit]
bootstrap = { replicates = 20 }
monte_carlo = { replicates = 20 }
multistart = { starts = 8 }
profile = { points = 11 }
contours = { grid = 7 }
"#;

/// The joint base study with the `n`-th (0-based) occurrence of `from` replaced.
fn joint(from: &str, n: usize, to: &str) -> Option<String> {
    let at = JOINT
        .match_indices(from)
        .nth(n)
        .unwrap_or_else(|| panic!("joint base study lacks {from:?} #{n}"))
        .0;
    Some(format!("{}{to}{}", &JOINT[..at], &JOINT[at + from.len()..]))
}

fn csv_rows() -> String {
    let mut s = String::from("t,y,u\n");
    for i in 0..12 {
        let t = 0.5 * i as f64;
        // Deterministic wiggle in place of noise; the values only need to be fittable.
        let y = 1.0 + 5.0 * (-t / 2.0f64).exp() + 0.01 * (7.0 * t).sin();
        s.push_str(&format!("{t},{y:.6},0.01\n"));
    }
    s
}

/// A counting study (Poisson likelihood) on the same file name.
const COUNTS: &str = r#"title = "catalogue counts"
[data]
file = "d.csv"
x = "t"
y = "y"

[model]
formula = "b*exp(-t/tau)"

[parameters]
b = { start = 8.0, min = 0 }
tau = { start = 2.0, min = 0.01, max = 100 }

[fit]
likelihood = "poisson"

[audit]
bootstrap = { replicates = 20 }
monte_carlo = { replicates = 20 }
multistart = { starts = 8 }
profile = { points = 11 }
contours = { grid = 7 }
"#;

/// Counts of a decay with zero counts in the tail (header on line 1, the
/// point at t = 0.5 i on line i + 2).
fn count_rows() -> String {
    let counts = [9, 7, 6, 4, 5, 2, 3, 1, 0, 1, 0, 0];
    let mut s = String::from("t,y,u\n");
    for (i, c) in counts.iter().enumerate() {
        s.push_str(&format!("{},{c},1\n", 0.5 * i as f64));
    }
    s
}

fn counts_with(f: impl Fn(&mut Vec<String>)) -> Option<Vec<u8>> {
    let mut lines: Vec<String> = count_rows().lines().map(str::to_string).collect();
    f(&mut lines);
    Some((lines.join("\n") + "\n").into_bytes())
}

fn counts_study(from: &str, to: &str) -> Option<String> {
    assert!(COUNTS.contains(from), "counting study lacks {from:?}");
    Some(COUNTS.replacen(from, to, 1))
}

struct Case {
    name: &'static str,
    study: Option<String>,
    csv: Option<Vec<u8>>,
    /// Arguments after the binary; `STUDY` and `OUT` are substituted.
    args: &'static [&'static str],
    code: i32,
    /// Substrings the stderr (or stdout on success) must contain.
    expect: &'static [&'static str],
}

fn replace(from: &str, to: &str) -> Option<String> {
    assert!(STUDY.contains(from), "base study lacks {from:?}");
    Some(STUDY.replacen(from, to, 1))
}

fn csv_with(f: impl Fn(&mut Vec<String>)) -> Option<Vec<u8>> {
    let mut lines: Vec<String> = csv_rows().lines().map(str::to_string).collect();
    f(&mut lines);
    Some((lines.join("\n") + "\n").into_bytes())
}

const AUDIT: &[&str] = &["audit", "STUDY", "--out", "OUT", "--quiet", "--only", "profile"];
const FIT: &[&str] = &["fit", "STUDY", "--json"];

fn cases() -> Vec<Case> {
    vec![
        Case {
            name: "study file missing",
            study: None,
            csv: None,
            args: &["fit", "nowhere.toml"],
            code: 2,
            expect: &["nowhere.toml"],
        },
        Case {
            name: "toml syntax",
            study: replace("[model]", "[model"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["study.toml", "line"],
        },
        Case {
            name: "unknown top-level key",
            study: replace("title =", "titel ="),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["titel"],
        },
        Case {
            name: "unknown data key",
            study: replace("sigma = \"u\"", "sigmaa = \"u\""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["sigmaa"],
        },
        Case {
            name: "unknown audit key",
            study: replace("[audit]", "[audit]\nbootstrapp = 3"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["bootstrapp"],
        },
        Case {
            name: "unknown bootstrap key",
            study: replace("replicates = 20 }", "replicate = 20 }"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["replicate"],
        },
        Case {
            name: "unknown scheme",
            study: replace("replicates = 20 }", "replicates = 20, scheme = \"jackknife\" }"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["jackknife"],
        },
        Case {
            name: "level out of range",
            study: replace("[audit]", "[audit]\nlevel = 1.5"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["level"],
        },
        Case {
            name: "parameter without start",
            study: replace("a = { start = 1.0 }", "a = { min = 0 }"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["`a`", "start"],
        },
        Case {
            name: "start outside bounds",
            study: replace("start = 2.0, min = 0.01", "start = 200.0, min = 0.01"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["tau", "bounds"],
        },
        Case {
            name: "min not below max",
            study: replace("min = 0.01, max = 100", "min = 100, max = 0.01"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["tau", "min"],
        },
        Case {
            name: "unknown name in formula",
            study: replace("a + b*exp", "a + bb*exp"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["bb", "`b`"],
        },
        Case {
            name: "formula syntax",
            study: replace("a + b*exp(-t/tau)", "a + b*exp(-t/tau"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["model.formula", "column"],
        },
        Case {
            name: "formula nested too deep",
            study: Some(STUDY.replace(
                "a + b*exp(-t/tau)",
                &format!("a + b*exp(-t/tau) + {}t{}", "(".repeat(500), ")".repeat(500)),
            )),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["model.formula"],
        },
        Case {
            name: "unknown function arity",
            study: replace("exp(-t/tau)", "exp(-t, tau)"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["exp"],
        },
        Case {
            name: "parameter not in formula",
            study: replace("[parameters]", "[parameters]\nextra = { start = 1 }"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["extra"],
        },
        Case {
            name: "data file missing",
            study: replace("file = \"d.csv\"", "file = \"absent.csv\""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["absent.csv"],
        },
        Case {
            name: "missing x column",
            study: replace("x = \"t\"", "x = \"time\""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["time", "`t`, `y`, `u`"],
        },
        Case {
            name: "sigma not positive",
            study: None,
            csv: csv_with(|l| l[4] = "1.5,2.0,0".into()),
            args: AUDIT,
            code: 2,
            expect: &["line 5", "u"],
        },
        Case {
            name: "non-numeric cell",
            study: None,
            csv: csv_with(|l| l[3] = "1.0,abc,0.01".into()),
            args: AUDIT,
            code: 2,
            expect: &["line 4", "abc"],
        },
        Case {
            name: "empty cell",
            study: None,
            csv: csv_with(|l| l[3] = "1.0,,0.01".into()),
            args: AUDIT,
            code: 2,
            expect: &["line 4", "column 2"],
        },
        Case {
            name: "NaN cell",
            study: None,
            csv: csv_with(|l| l[6] = "3.0,NaN,0.01".into()),
            args: AUDIT,
            code: 2,
            expect: &["line 7"],
        },
        Case {
            name: "infinite cell",
            study: None,
            csv: csv_with(|l| l[6] = "3.0,inf,0.01".into()),
            args: AUDIT,
            code: 2,
            expect: &["line 7"],
        },
        Case {
            name: "1 GB-looking number",
            study: None,
            csv: csv_with(|l| l[2] = "0.5,1e400,0.01".into()),
            args: AUDIT,
            code: 2,
            expect: &["line 3"],
        },
        Case {
            name: "ragged row",
            study: None,
            csv: csv_with(|l| l[5] = "2.0,1.0".into()),
            args: AUDIT,
            code: 2,
            expect: &["line 6"],
        },
        Case {
            name: "non-UTF-8 bytes",
            study: None,
            csv: {
                let mut b = csv_rows().into_bytes();
                b.extend_from_slice(b"7.0,1.\xff,0.01\n");
                Some(b)
            },
            args: AUDIT,
            code: 2,
            expect: &["d.csv", "UTF-8"],
        },
        Case {
            name: "no data rows",
            study: None,
            csv: Some(b"t,y,u\n# nothing measured\n".to_vec()),
            args: AUDIT,
            code: 2,
            expect: &["d.csv"],
        },
        Case {
            name: "more parameters than points",
            study: None,
            csv: csv_with(|l| l.truncate(3)),
            args: AUDIT,
            code: 2,
            expect: &["points"],
        },
        Case {
            name: "duplicate column header",
            study: None,
            csv: csv_with(|l| l[0] = "t,y,t".into()),
            args: AUDIT,
            code: 2,
            expect: &["t"],
        },
        Case {
            name: "decimal comma",
            study: None,
            csv: csv_with(|l| {
                for r in l.iter_mut() {
                    *r = r.replace(',', ";").replace('.', ",");
                }
            }),
            args: AUDIT,
            code: 2,
            expect: &["decimal"],
        },
        Case {
            name: "constant x column",
            study: None,
            csv: csv_with(|l| {
                for r in l.iter_mut().skip(1) {
                    let rest: Vec<&str> = r.split(',').skip(1).collect();
                    *r = format!("1.0,{}", rest.join(","));
                }
            }),
            args: AUDIT,
            code: 2,
            expect: &["t"],
        },
        Case {
            name: "not finite at the start",
            study: replace("a + b*exp(-t/tau)", "a + b*exp(-t/tau) + sqrt(1 - t)"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["finite"],
        },
        Case {
            name: "replicates zero",
            study: None,
            csv: None,
            args: &["audit", "STUDY", "--out", "OUT", "--replicates", "0"],
            code: 2,
            expect: &["replicates"],
        },
        Case {
            name: "threads zero",
            study: None,
            csv: None,
            args: &["audit", "STUDY", "--out", "OUT", "--threads", "0"],
            code: 2,
            expect: &["threads"],
        },
        Case {
            name: "unknown diagnostic",
            study: None,
            csv: None,
            args: &["audit", "STUDY", "--out", "OUT", "--only", "jackknife"],
            code: 2,
            expect: &["jackknife"],
        },
        Case {
            name: "unknown method",
            study: None,
            csv: None,
            args: &["fit", "STUDY", "--method", "newton"],
            code: 2,
            expect: &["newton"],
        },
        Case {
            name: "output folder is someone else's",
            study: None,
            csv: None,
            args: &[
                "audit", "STUDY", "--out", "FOREIGN", "--quiet", "--only", "profile",
            ],
            code: 2,
            expect: &["foreign", "fitaudit"],
        },
        Case {
            name: "output folder not writable",
            study: None,
            csv: None,
            args: &[
                "audit", "STUDY", "--out", "BLOCKED", "--quiet", "--only", "profile",
            ],
            code: 2,
            expect: &["blocker"],
        },
        Case {
            name: "study path is a folder",
            study: None,
            csv: None,
            args: &["check", "DIR"],
            code: 2,
            expect: &["cannot read"],
        },
        Case {
            name: "million-digit number",
            study: None,
            csv: csv_with(|l| l[2] = format!("0.5,{},0.01", "1".repeat(1_000_000))),
            args: AUDIT,
            code: 2,
            expect: &["line 3", "column 2", "too large"],
        },
        Case {
            name: "duplicate header of the y column",
            study: None,
            csv: csv_with(|l| l[0] = "t,y,y".into()),
            args: AUDIT,
            code: 2,
            expect: &["line 1", "`y`", "columns 2 and 3"],
        },
        Case {
            name: "every x value the same",
            study: None,
            csv: csv_with(|l| {
                for r in l.iter_mut().skip(1) {
                    let rest: Vec<&str> = r.split(',').skip(1).collect();
                    *r = format!("1.0,{}", rest.join(","));
                }
            }),
            args: AUDIT,
            code: 2,
            expect: &["d.csv", "`t`", "constant"],
        },
        Case {
            name: "quoted decimal comma in a comma-separated file",
            study: None,
            csv: csv_with(|l| l[3] = "1.0,\"4,5\",0.01".into()),
            args: AUDIT,
            code: 2,
            expect: &["line 4", "column 2", "4,5"],
        },
        Case {
            name: "empty data file",
            study: None,
            csv: Some(Vec::new()),
            args: AUDIT,
            code: 2,
            expect: &["d.csv", "empty"],
        },
        Case {
            name: "data file is a folder",
            study: replace("file = \"d.csv\"", "file = \".\""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["data.file", "cannot read"],
        },
        Case {
            name: "empty study file",
            study: Some(String::new()),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["study.toml", "data"],
        },
        Case {
            name: "study file not UTF-8",
            study: None,
            csv: None,
            args: &["check", "STUDY_RAW_LATIN1"],
            code: 2,
            expect: &["latin1.toml", "UTF-8"],
        },
        Case {
            name: "empty formula",
            study: replace("a + b*exp(-t/tau)", ""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["model.formula", "empty"],
        },
        Case {
            name: "y column is the x column",
            study: replace("y = \"y\"", "y = \"t\""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["data.y", "x column"],
        },
        Case {
            name: "sigma column is the y column",
            study: replace("sigma = \"u\"", "sigma = \"y\""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["data.sigma"],
        },
        Case {
            name: "negative sigma number",
            study: replace("sigma = \"u\"", "sigma = -0.01"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["data.sigma", "positive"],
        },
        Case {
            name: "starts zero",
            study: None,
            csv: None,
            args: &["audit", "STUDY", "--out", "OUT", "--starts", "0"],
            code: 2,
            expect: &["--starts", "at least 1"],
        },
        Case {
            name: "replicates not a number",
            study: None,
            csv: None,
            args: &["audit", "STUDY", "--out", "OUT", "--replicates", "1e3"],
            code: 2,
            expect: &["--replicates", "1e3"],
        },
        Case {
            name: "negative seed",
            study: None,
            csv: None,
            args: &["audit", "STUDY", "--out", "OUT", "--seed", "-1"],
            code: 2,
            expect: &["-1"],
        },
        Case {
            name: "output path is a file",
            study: None,
            csv: None,
            args: &[
                "audit", "STUDY", "--out", "FILEOUT", "--quiet", "--only", "profile",
            ],
            code: 2,
            expect: &["blocker", "not a folder"],
        },
        Case {
            name: "output path ends in a dot",
            study: None,
            csv: None,
            args: &[
                "audit", "STUDY", "--out", "DOTOUT", "--quiet", "--only", "profile",
            ],
            code: 2,
            expect: &["does not end in a folder name"],
        },
        // Inputs that must work.
        Case {
            name: "million-digit number that fits",
            study: None,
            csv: csv_with(|l| l[2] = format!("0.5,4.5{}1,0.01", "0".repeat(1_000_000))),
            args: FIT,
            code: 0,
            expect: &["\"converged\": true"],
        },
        Case {
            name: "byte-order mark, semicolons and Windows line ends together",
            study: None,
            csv: {
                let mut b = vec![0xEF, 0xBB, 0xBF];
                b.extend(csv_rows().replace(',', ";").replace('\n', "\r\n").into_bytes());
                Some(b)
            },
            args: FIT,
            code: 0,
            expect: &["\"converged\": true"],
        },
        Case {
            name: "100000 columns",
            study: None,
            csv: csv_with(|l| {
                for (k, r) in l.iter_mut().enumerate() {
                    let extra: Vec<String> = (0..100_000)
                        .map(|c| if k == 0 { format!("c{c}") } else { "0".into() })
                        .collect();
                    r.push(',');
                    r.push_str(&extra.join(","));
                }
            }),
            args: FIT,
            code: 0,
            expect: &["\"converged\": true"],
        },
        Case {
            name: "byte-order mark",
            study: None,
            csv: {
                let mut b = vec![0xEF, 0xBB, 0xBF];
                b.extend(csv_rows().into_bytes());
                Some(b)
            },
            args: FIT,
            code: 0,
            expect: &["\"converged\": true"],
        },
        Case {
            name: "Windows line ends",
            study: Some(STUDY.replace('\n', "\r\n")),
            csv: Some(csv_rows().replace('\n', "\r\n").into_bytes()),
            args: FIT,
            code: 0,
            expect: &["\"converged\": true"],
        },
        Case {
            name: "poisson: a negative count",
            study: Some(COUNTS.to_string()),
            csv: counts_with(|l| l[4] = "1.5,-1,1".into()),
            args: FIT,
            code: 2,
            expect: &["d.csv, line 5, column 2", "count -1", "whole number"],
        },
        Case {
            name: "poisson: a count that is not a whole number",
            study: Some(COUNTS.to_string()),
            csv: counts_with(|l| l[7] = "3,2.5,1".into()),
            args: FIT,
            code: 2,
            expect: &["d.csv, line 8, column 2", "count 2.5"],
        },
        Case {
            name: "poisson: sigma given with counts",
            study: counts_study("y = \"y\"\n", "y = \"y\"\nsigma = \"u\"\n"),
            csv: Some(count_rows().into_bytes()),
            args: FIT,
            code: 2,
            expect: &["data.sigma", "line 6", "poisson"],
        },
        Case {
            name: "poisson: wild bootstrap",
            study: counts_study(
                "bootstrap = { replicates = 20 }",
                "bootstrap = { replicates = 20, scheme = \"wild\" }",
            ),
            csv: Some(count_rows().into_bytes()),
            args: FIT,
            code: 2,
            expect: &["audit.bootstrap.scheme", "poisson"],
        },
        Case {
            name: "poisson: Student-t Monte Carlo noise",
            study: counts_study(
                "monte_carlo = { replicates = 20 }",
                "monte_carlo = { replicates = 20, student_t_dof = 5 }",
            ),
            csv: Some(count_rows().into_bytes()),
            args: FIT,
            code: 2,
            expect: &["audit.monte_carlo.student_t_dof"],
        },
        Case {
            name: "poisson: Student-t coverage noise",
            study: counts_study(
                "monte_carlo = { replicates = 20 }",
                "monte_carlo = { replicates = 20 }\ncoverage = { student_t_dof = 5 }",
            ),
            csv: Some(count_rows().into_bytes()),
            args: FIT,
            code: 2,
            expect: &["audit.coverage.student_t_dof", "Poisson counts"],
        },
        Case {
            name: "unknown likelihood",
            study: counts_study("likelihood = \"poisson\"", "likelihood = \"binomial\""),
            csv: Some(count_rows().into_bytes()),
            args: FIT,
            code: 2,
            expect: &["line 15", "binomial", "`gaussian` or `poisson`"],
        },
        Case {
            name: "poisson: zero counts are data, not an error",
            study: Some(COUNTS.to_string()),
            csv: Some(count_rows().into_bytes()),
            args: FIT,
            code: 0,
            expect: &[
                "\"converged\": true",
                "\"statistic\": \"deviance\"",
                "\"likelihood\": \"poisson\"",
            ],
        },
        Case {
            name: "errors in x without sigma of y",
            study: replace("sigma = \"u\"\n", "sigma_x = 0.01\n"),
            csv: None,
            args: FIT,
            code: 2,
            expect: &["data.sigma_x", "line 6", "needs data.sigma"],
        },
        Case {
            name: "errors in x: negative sigma_x",
            study: replace("sigma = \"u\"\n", "sigma = \"u\"\nsigma_x = -0.1\n"),
            csv: None,
            args: FIT,
            code: 2,
            expect: &["data.sigma_x", ">= 0"],
        },
        Case {
            name: "errors in x: a negative sigma_x in its column",
            study: replace("sigma = \"u\"\n", "sigma = \"u\"\nsigma_x = \"ux\"\n"),
            csv: csv_with(|l| {
                for (k, r) in l.iter_mut().enumerate() {
                    r.push_str(match k {
                        0 => ",ux",
                        3 => ",-0.02",
                        _ => ",0.02",
                    });
                }
            }),
            args: FIT,
            code: 2,
            expect: &["d.csv, line 4, column 4", "sigma_x -0.02"],
        },
        Case {
            name: "errors in x with counts",
            study: counts_study("y = \"y\"\n", "y = \"y\"\nsigma_x = 0.1\n"),
            csv: Some(count_rows().into_bytes()),
            args: FIT,
            code: 2,
            expect: &["data.sigma_x", "poisson"],
        },
        Case {
            name: "errors in x: a number for every point fits",
            study: replace("sigma = \"u\"\n", "sigma = \"u\"\nsigma_x = 0.01\n"),
            csv: None,
            args: FIT,
            code: 0,
            expect: &["\"converged\": true", "\"errors_in_x\": true"],
        },
        Case {
            name: "joint: [data] together with [[datasets]]",
            study: Some(format!(
                "{JOINT}\n[data]\nfile = \"d.csv\"\nx = \"t\"\ny = \"y\"\n"
            )),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &[
                "study.toml",
                "`data`",
                "cannot be used together with [[datasets]]",
            ],
        },
        Case {
            name: "joint: errors in x in a data set",
            study: joint("sigma = \"u\"\n", 1, "sigma = \"u\"\nsigma_x = 0.01\n"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["datasets[1].sigma_x", "not supported", "[[datasets]]"],
        },
        Case {
            name: "joint: poisson counts are checked per data set",
            study: Some(format!(
                "{}\n[fit]\nlikelihood = \"poisson\"\n",
                JOINT.replace("sigma = \"u\"\n", "")
            )),
            csv: None,
            args: FIT,
            code: 2,
            expect: &["d.csv, line 3, column 2", "whole number"],
        },
        Case {
            name: "joint: [model] together with [[datasets]]",
            study: Some(format!("{JOINT}\n[model]\nformula = \"a\"\n")),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["`model`", "[[datasets]]"],
        },
        Case {
            name: "neither [data] nor [[datasets]]",
            study: Some("[model]\nformula = \"a*t\"\n[parameters]\na = { start = 1 }\n".into()),
            csv: None,
            args: FIT,
            code: 2,
            expect: &["`data`", "is missing", "[[datasets]]"],
        },
        Case {
            name: "joint: unknown name in a data set's formula",
            study: joint("a2 + b*exp(-t/tau)", 0, "a2 + b*exp(-t/tau3)"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &[
                "`datasets[1].formula`",
                "`tau3`",
                "did you mean `tau`?",
                "line 16, column 26",
            ],
        },
        Case {
            name: "joint: parameter used by no formula",
            study: joint(
                "b = { start = 4.0 }",
                0,
                "b = { start = 4.0 }\nzz = { start = 1 }",
            ),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["`parameters.zz`", "no data set's formula uses it"],
        },
        Case {
            name: "joint: two data sets of one name",
            study: joint("name = \"B\"", 0, "name = \"A\""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["`datasets[1].name`", "`A`", "datasets[0]"],
        },
        Case {
            name: "joint: data set without a name",
            study: joint("name = \"A\"\n", 0, ""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["`datasets[0].name`", "missing"],
        },
        Case {
            name: "joint: data set without a formula",
            study: joint("formula = \"a + b*exp(-t/tau)\"\n", 0, ""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["`datasets[0].formula`", "missing"],
        },
        Case {
            name: "joint: missing column in a data set",
            study: joint("y = \"y\"", 1, "y = \"yy\""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["`datasets[1].y`", "`yy`", "d.csv"],
        },
        Case {
            name: "joint: unknown key in a data set",
            study: joint("sigma = \"u\"", 1, "sigmaa = \"u\""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["sigmaa", "datasets"],
        },
        Case {
            name: "joint: sigma in one data set only",
            study: joint("sigma = \"u\"\n", 1, ""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["`datasets[1].sigma`", "every data set states sigma or none"],
        },
        Case {
            name: "joint: non-positive sigma value",
            study: joint("sigma = \"u\"", 0, "sigma = -0.5"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["`datasets[0].sigma`", "positive"],
        },
        Case {
            name: "joint: data file absent",
            study: joint("file = \"d.csv\"", 1, "file = \"absent.csv\""),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["`datasets[1].file`", "absent.csv"],
        },
        Case {
            name: "joint: inverse prediction",
            study: Some(format!("{JOINT}\n[[inverse]]\nname = \"s1\"\ny = 2.0\n")),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["`inverse[0]`", "single data set"],
        },
        Case {
            name: "joint: x header that is not a name, in a data set",
            study: joint("x = \"t\"", 0, "x = \"t (s)\""),
            csv: csv_with(|l| l[0] = l[0].replacen("t,", "t (s),", 1)),
            args: AUDIT,
            code: 2,
            expect: &[
                "`datasets[0].x`",
                "`t (s)`",
                "columns = { t = \"t (s)\" }",
                "in datasets[0]",
            ],
        },
        Case {
            name: "joint: alias that is not a name, in a data set",
            study: joint("sigma = \"u\"", 0, "sigma = \"u\"\ncolumns = { 1u = \"u\" }"),
            csv: None,
            args: AUDIT,
            code: 2,
            expect: &["`datasets[0].columns.1u`", "alias"],
        },
        Case {
            name: "joint: the base joint study fits",
            study: Some(JOINT.to_string()),
            csv: None,
            args: FIT,
            code: 0,
            expect: &["\"converged\": true"],
        },
        Case {
            name: "many columns",
            study: None,
            csv: csv_with(|l| {
                for (k, r) in l.iter_mut().enumerate() {
                    let extra: Vec<String> = (0..2000)
                        .map(|c| if k == 0 { format!("c{c}") } else { "0".into() })
                        .collect();
                    r.push(',');
                    r.push_str(&extra.join(","));
                }
            }),
            args: FIT,
            code: 0,
            expect: &["\"converged\": true"],
        },
    ]
}

fn setup(dir: &Path, case: &Case) -> PathBuf {
    let study = dir.join("study.toml");
    std::fs::write(&study, case.study.clone().unwrap_or_else(|| STUDY.to_string())).unwrap();
    std::fs::write(
        dir.join("d.csv"),
        case.csv.clone().unwrap_or_else(|| csv_rows().into_bytes()),
    )
    .unwrap();
    let foreign = dir.join("foreign");
    std::fs::create_dir_all(&foreign).unwrap();
    std::fs::write(foreign.join("notes.txt"), "keep me").unwrap();
    std::fs::write(dir.join("blocker"), "a file where a folder should go").unwrap();
    study
}

#[test]
fn every_bad_input_exits_2_names_the_culprit_and_leaves_no_output() {
    let cases = cases();
    assert!(
        cases.iter().filter(|c| c.code != 0).count() >= 30,
        "the catalogue keeps at least 30 bad inputs"
    );
    let mut failures = Vec::new();
    for case in &cases {
        let tmp = tempfile::tempdir().unwrap();
        let dir = tmp.path();
        let study = setup(dir, case);
        let out = dir.join("out");
        let args: Vec<String> = case
            .args
            .iter()
            .map(|a| match *a {
                "STUDY" => study.display().to_string(),
                "OUT" => out.display().to_string(),
                "FOREIGN" => dir.join("foreign").display().to_string(),
                "BLOCKED" => dir.join("blocker").join("sub").display().to_string(),
                "FILEOUT" => dir.join("blocker").display().to_string(),
                "DOTOUT" => format!("{}/.", out.display()),
                "STUDY_RAW_LATIN1" => {
                    // A study file saved as Latin-1: `é` is the single byte 0xE9.
                    let p = dir.join("latin1.toml");
                    std::fs::write(&p, b"title = \"caf\xe9\"\n").unwrap();
                    p.display().to_string()
                }
                "DIR" => dir.display().to_string(),
                other => other.to_string(),
            })
            .collect();
        let output = Command::cargo_bin("fitaudit")
            .unwrap()
            .current_dir(dir)
            .args(&args)
            .output()
            .unwrap();
        let code = output.status.code().unwrap_or(-1);
        let text = format!(
            "{}{}",
            String::from_utf8_lossy(&output.stderr),
            String::from_utf8_lossy(&output.stdout)
        );
        let mut problems = Vec::new();
        if code != case.code {
            problems.push(format!("exit {code}, expected {}", case.code));
        }
        for needle in case.expect {
            if !text.contains(needle) {
                problems.push(format!("message lacks {needle:?}"));
            }
        }
        if text.contains("panicked") {
            problems.push("panicked".into());
        }
        if case.code != 0 && out.exists() {
            problems.push("an output folder was left behind".into());
        }
        let leftovers: Vec<String> = std::fs::read_dir(dir)
            .unwrap()
            .filter_map(|e| e.ok())
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .filter(|n| n.contains("partial"))
            .collect();
        if !leftovers.is_empty() {
            problems.push(format!("staging folders left: {leftovers:?}"));
        }
        assert_eq!(
            std::fs::read_to_string(dir.join("foreign/notes.txt")).unwrap(),
            "keep me"
        );
        if !problems.is_empty() {
            failures.push(format!(
                "{}: {}\n    output: {}",
                case.name,
                problems.join("; "),
                text.trim()
            ));
        }
    }
    assert!(
        failures.is_empty(),
        "{} case(s) failed:\n{}",
        failures.len(),
        failures.join("\n")
    );
}
