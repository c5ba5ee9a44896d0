//! The bad-input catalogue, second wave (issue 21): output folders that
//! hold the user's files, links and odd paths, inputs that are not regular
//! files or too large, size settings and flags beyond their maxima, control
//! characters, numbers that overflow at the start, names that shadow the
//! built-in constants, and more. Each failing case asserts the exit status,
//! that the message names the culprit, that the message is bounded and free
//! of raw control characters, and that the run changed nothing in its
//! folder (no output, no staging folder, no empty parent folder). Cases that
//! must work assert success. The expectations are the tool's own contract
//! (README, "Exit status", "Limits" and "Output folders"); no outside
//! source applies.

#![cfg(unix)]

use std::collections::BTreeMap;
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

struct Case {
    name: &'static str,
    study: Option<String>,
    csv: Option<Vec<u8>>,
    /// Extra preparation of the case's folder (after study and data).
    prep: fn(&Path),
    /// Arguments after the binary; `STUDY`, `OUT` and `DIR` are substituted.
    args: Vec<String>,
    code: i32,
    /// Substrings the stderr (or stdout on success) must contain.
    expect: &'static [&'static str],
    /// Substrings that must not appear anywhere in the output.
    forbid: &'static [&'static str],
}

fn none(_: &Path) {}

fn base(name: &'static str) -> Case {
    Case {
        name,
        study: None,
        csv: None,
        prep: none,
        args: args(AUDIT),
        code: 2,
        expect: &[],
        forbid: &[],
    }
}

fn args(a: &[&str]) -> Vec<String> {
    a.iter().map(|s| s.to_string()).collect()
}

fn replace(from: &str, to: &str) -> Option<String> {
    assert!(STUDY.contains(from), "base study lacks {from:?}");
    Some(STUDY.replacen(from, to, 1))
}

fn audit_line(line: &str) -> Option<String> {
    replace("[audit]", &format!("[audit]\n{line}"))
}

fn csv_with(f: impl Fn(&mut Vec<String>)) -> Option<Vec<u8>> {
    let mut lines: Vec<String> = csv_rows().lines().map(str::to_string).collect();
    f(&mut lines);
    Some((lines.join("\n") + "\n").into_bytes())
}

const AUDIT: &[&str] = &["audit", "STUDY", "--out", "OUT", "--quiet", "--only", "profile"];
const FIT: &[&str] = &["fit", "STUDY", "--json"];
const CHECK: &[&str] = &["check", "STUDY"];

fn audit_out(out: &str) -> Vec<String> {
    args(&["audit", "STUDY", "--out", out, "--quiet", "--only", "profile"])
}

/// A folder that looks like an earlier report (current marker format).
fn earlier_report(dir: &Path, files: &[&str]) {
    std::fs::create_dir_all(dir.join("figures")).unwrap();
    let mut marker = String::from("written by fitaudit; this folder is replaced by the next run\npid 1\n");
    for f in files {
        marker.push_str(&format!("file {f}\n"));
        std::fs::write(dir.join(f), "old").unwrap();
    }
    std::fs::write(dir.join(".fitaudit-output"), marker).unwrap();
}

#[cfg(unix)]
fn mkfifo(p: &Path) {
    use std::ffi::CString;
    use std::os::unix::ffi::OsStrExt;
    let c = CString::new(p.as_os_str().as_bytes()).unwrap();
    // SAFETY: a NUL-terminated path.
    assert_eq!(unsafe { libc::mkfifo(c.as_ptr(), 0o600) }, 0);
}

fn cases() -> Vec<Case> {
    let long_leaf = format!("--out={}", "n".repeat(230));
    let long_component = format!("{}/x", "c".repeat(300));
    vec![
        // ---- output folders -------------------------------------------------
        Case {
            prep: |d| {
                earlier_report(&d.join("real"), &["report.html"]);
                std::os::unix::fs::symlink(d.join("real"), d.join("lnk")).unwrap();
            },
            args: audit_out("lnk"),
            expect: &["lnk", "symbolic link"],
            ..base("--out names a link to an earlier report")
        },
        Case {
            prep: |d| {
                earlier_report(&d.join("rep"), &["report.html"]);
                std::fs::copy(d.join("study.toml"), d.join("rep/study.toml")).unwrap();
                std::fs::copy(d.join("d.csv"), d.join("rep/d.csv")).unwrap();
            },
            args: args(&[
                "audit",
                "rep/study.toml",
                "--out",
                "rep",
                "--quiet",
                "--only",
                "profile",
            ]),
            expect: &["rep/study.toml", "an input of this run"],
            ..base("the study kept inside the earlier report folder")
        },
        Case {
            args: audit_out("DIR"),
            expect: &["an input of this run", "study.toml"],
            ..base("--out is the study's own folder")
        },
        Case {
            study: replace("file = \"d.csv\"", "file = \"data/d.csv\""),
            prep: |d| {
                std::fs::create_dir(d.join("data")).unwrap();
                std::fs::copy(d.join("d.csv"), d.join("data/d.csv")).unwrap();
            },
            args: audit_out("data"),
            expect: &["data/d.csv", "an input of this run"],
            ..base("--out is the data file's folder")
        },
        Case {
            args: audit_out("study.toml"),
            expect: &["study.toml"],
            ..base("--out is the study file itself")
        },
        Case {
            prep: |d| {
                earlier_report(&d.join("rep"), &["report.html", "results.json"]);
                std::fs::write(d.join("rep/notes.txt"), "mine").unwrap();
            },
            args: audit_out("rep"),
            expect: &["notes.txt", "did not write"],
            ..base("an earlier report with a file of the user's")
        },
        Case {
            prep: |d| {
                earlier_report(&d.join("rep"), &["report.html"]);
                std::fs::write(d.join("rep/figures/mine.svg"), "<svg/>").unwrap();
            },
            args: audit_out("rep"),
            expect: &["figures/mine.svg", "did not write"],
            ..base("an earlier report with a figure of the user's")
        },
        Case {
            prep: |d| {
                earlier_report(&d.join("rep"), &["report.html"]);
                std::os::unix::fs::symlink("/etc", d.join("rep/link")).unwrap();
            },
            args: audit_out("rep"),
            expect: &["rep/link", "did not write"],
            ..base("an earlier report holding a link")
        },
        Case {
            prep: |d| {
                // Written before the marker listed files: fixed names only.
                std::fs::create_dir_all(d.join("legacy/figures")).unwrap();
                std::fs::write(
                    d.join("legacy/.fitaudit-output"),
                    "written by fitaudit; this folder is replaced by the next run\n",
                )
                .unwrap();
                std::fs::write(d.join("legacy/report.html"), "old").unwrap();
                std::fs::write(d.join("legacy/measurements.csv"), "1,2").unwrap();
            },
            args: audit_out("legacy"),
            expect: &["measurements.csv"],
            ..base("an older report with a data file of the user's")
        },
        Case {
            args: audit_out("new/../x"),
            expect: &["new/../x", "does not exist"],
            ..base("--out new/../x")
        },
        Case {
            args: audit_out("new/sub/../../x"),
            expect: &["new/sub/../../x", "does not exist"],
            ..base("--out new/sub/../../x")
        },
        Case {
            args: vec![
                "audit".into(),
                "STUDY".into(),
                long_leaf,
                "--quiet".into(),
                "--only".into(),
                "profile".into(),
            ],
            expect: &["too long", "230 bytes"],
            ..base("--out with a 230-byte name")
        },
        Case {
            args: audit_out(Box::leak(long_component.into_boxed_str())),
            expect: &["too long", "300 bytes"],
            ..base("--out with a 300-byte folder name in the middle")
        },
        Case {
            args: audit_out("/dev/null"),
            expect: &["/dev/null", "not a folder"],
            ..base("--out /dev/null")
        },
        Case {
            prep: |d| mkfifo(&d.join("pipe")),
            args: audit_out("pipe"),
            expect: &["pipe", "not a folder"],
            ..base("--out names a FIFO")
        },
        Case {
            args: audit_out("/"),
            expect: &["does not end in a folder name"],
            ..base("--out /")
        },
        // ---- inputs that are not regular files, or too large -----------------
        Case {
            prep: |d| mkfifo(&d.join("pipe.toml")),
            args: args(&["check", "pipe.toml"]),
            expect: &["pipe.toml", "named pipe"],
            ..base("the study file is a FIFO")
        },
        Case {
            study: replace("file = \"d.csv\"", "file = \"pipe.csv\""),
            prep: |d| mkfifo(&d.join("pipe.csv")),
            args: args(CHECK),
            expect: &["pipe.csv", "named pipe", "data.file"],
            ..base("the data file is a FIFO")
        },
        Case {
            study: replace("file = \"d.csv\"", "file = \"/dev/zero\""),
            args: args(AUDIT),
            expect: &["/dev/zero", "character device"],
            ..base("the data file is /dev/zero")
        },
        Case {
            study: replace("file = \"d.csv\"", "file = \"/dev/urandom\""),
            args: args(FIT),
            expect: &["/dev/urandom", "character device"],
            ..base("the data file is /dev/urandom")
        },
        Case {
            args: args(&["check", "/dev/zero"]),
            expect: &["/dev/zero", "character device"],
            ..base("the study file is /dev/zero")
        },
        Case {
            args: args(&["fit", "DIR"]),
            expect: &["a folder, not a regular file"],
            ..base("the study file is a folder")
        },
        Case {
            study: replace("file = \"d.csv\"", "file = \"sub\""),
            prep: |d| std::fs::create_dir(d.join("sub")).unwrap(),
            args: args(CHECK),
            expect: &["sub", "a folder, not a regular file"],
            ..base("the data file is a folder")
        },
        Case {
            study: replace("file = \"d.csv\"", "file = \"zero.csv\""),
            prep: |d| std::os::unix::fs::symlink("/dev/zero", d.join("zero.csv")).unwrap(),
            args: args(CHECK),
            expect: &["zero.csv", "character device"],
            ..base("the data file is a link to /dev/zero")
        },
        Case {
            study: replace("file = \"d.csv\"", "file = \"gone.csv\""),
            prep: |d| std::os::unix::fs::symlink(d.join("nowhere.csv"), d.join("gone.csv")).unwrap(),
            args: args(CHECK),
            expect: &["gone.csv", "data.file"],
            ..base("the data file is a dangling link")
        },
        Case {
            study: Some(format!("{STUDY}# {}\n", "x".repeat(1 << 20))),
            args: args(CHECK),
            expect: &["study.toml", "more than the limit of 1048576 bytes"],
            ..base("a study file over 1 MiB")
        },
        Case {
            study: replace("file = \"d.csv\"", &format!("file = \"{}.csv\"", "f".repeat(300))),
            args: args(CHECK),
            expect: &["data.file"],
            ..base("a data file name of 300 bytes")
        },
        // ---- size settings and flags beyond their maxima ---------------------
        Case {
            args: args(&["audit", "STUDY", "--out", "OUT", "--replicates", "1000000000000"]),
            expect: &["--replicates", "largest allowed, 1000000"],
            ..base("--replicates 1e12")
        },
        Case {
            args: args(&["audit", "STUDY", "--out", "OUT", "--starts", "1000000000000"]),
            expect: &["--starts", "largest allowed, 100000"],
            ..base("--starts 1e12")
        },
        Case {
            args: args(&["audit", "STUDY", "--out", "OUT", "--threads", "8000"]),
            expect: &["--threads", "largest allowed, 256"],
            ..base("--threads 8000")
        },
        Case {
            args: args(&["demo", "--out", "OUT", "--threads", "100000"]),
            expect: &["--threads", "largest allowed"],
            ..base("demo --threads 100000")
        },
        Case {
            study: replace(
                "profile = { points = 11 }",
                "profile = { points = 1000000000000 }",
            ),
            expect: &["audit.profile.points", "largest allowed, 2001"],
            ..base("profile.points = 1e12")
        },
        Case {
            study: replace("contours = { grid = 7 }", "contours = { grid = 1000000 }"),
            expect: &["audit.contours.grid", "largest allowed, 201"],
            ..base("contours.grid = 1e6")
        },
        Case {
            study: replace(
                "bootstrap = { replicates = 20 }",
                "bootstrap = { replicates = 2000000 }",
            ),
            expect: &["audit.bootstrap.replicates", "largest allowed"],
            ..base("bootstrap.replicates = 2e6")
        },
        Case {
            study: replace(
                "monte_carlo = { replicates = 20 }",
                "monte_carlo = { replicates = 1000000000000 }",
            ),
            expect: &["audit.monte_carlo.replicates", "largest allowed"],
            ..base("monte_carlo.replicates = 1e12")
        },
        Case {
            study: replace("multistart = { starts = 8 }", "multistart = { starts = 1000000 }"),
            expect: &["audit.multistart.starts", "largest allowed"],
            ..base("multistart.starts = 1e6")
        },
        Case {
            study: replace(
                "multistart = { starts = 8 }",
                "multistart = { starts = 8, max_starts = 100000000 }",
            ),
            expect: &["audit.multistart.max_starts", "largest allowed"],
            ..base("multistart.max_starts = 1e8")
        },
        Case {
            study: replace("[audit]", "[fit]\nmax_iterations = 100000000000\n[audit]"),
            args: args(FIT),
            expect: &["fit.max_iterations", "largest allowed"],
            ..base("fit.max_iterations = 1e11")
        },
        Case {
            study: replace(
                "contours = { grid = 7 }",
                &format!(
                    "contours = {{ grid = 7, pairs = [{}] }}",
                    vec!["[\"a\", \"b\"]"; 101].join(", ")
                ),
            ),
            expect: &["audit.contours.pairs", "largest allowed, 100"],
            ..base("101 contour pairs")
        },
        // ---- settings across their ranges -------------------------------------
        Case {
            study: audit_line("level = 0.0001"),
            expect: &["audit.level", "0.001"],
            ..base("level below 0.001")
        },
        Case {
            study: audit_line("level = 0.99999"),
            expect: &["audit.level", "0.9999"],
            ..base("level above 0.9999")
        },
        Case {
            study: audit_line("level = 0.001"),
            code: 0,
            expect: &["a ", "holds"],
            forbid: &["NaN", "fails"],
            ..base("level 0.001 gives finite thresholds")
        },
        Case {
            study: audit_line("level = 0.01"),
            code: 0,
            expect: &["holds"],
            forbid: &["NaN", "fails"],
            ..base("level 0.01 gives finite thresholds")
        },
        Case {
            study: audit_line("level = 0.9999"),
            code: 0,
            expect: &["holds"],
            forbid: &["NaN", "fails"],
            ..base("level 0.9999 gives finite thresholds")
        },
        Case {
            study: replace("[audit]", "[fit]\nmax_iterations = 1\n[audit]"),
            args: args(FIT),
            code: 0,
            expect: &["\"iterations\": 1,", "\"converged\": false", "iteration-limit"],
            ..base("max_iterations = 1 caps the whole fit")
        },
        // ---- names ------------------------------------------------------------
        Case {
            study: replace(
                "formula = \"a + b*exp(-t/tau)\"",
                "formula = \"a + b*exp(-t/pi)\"",
            )
            .map(|s| s.replace("tau = {", "pi = {")),
            args: args(CHECK),
            expect: &["parameters.pi", "built-in constant"],
            ..base("a parameter named pi")
        },
        Case {
            study: replace("[audit]", "[constants]\ne = 2.0\n[audit]"),
            args: args(CHECK),
            expect: &["constants.e", "built-in constant"],
            ..base("a constant named e")
        },
        Case {
            study: replace("x = \"t\"", "x = \"e\"").map(|s| s.replace("-t/tau", "-e/tau")),
            csv: Some(csv_rows().replacen("t,y,u", "e,y,u", 1).into_bytes()),
            args: args(CHECK),
            expect: &["data.x", "`e`", "built-in constant"],
            ..base("an x column named e")
        },
        Case {
            study: replace("sigma = \"u\"", "sigma = \"u\"\ncolumns = { pi = \"t\" }"),
            args: args(CHECK),
            expect: &["data.columns.pi", "built-in constant"],
            ..base("a column alias named pi")
        },
        Case {
            study: replace("[audit]", "[derived]\npi = \"2*tau\"\n[audit]"),
            args: args(CHECK),
            expect: &["derived.pi", "built-in constant"],
            ..base("a derived quantity named pi")
        },
        Case {
            study: replace(
                "a = { start = 1.0 }",
                &format!("{0} = {{ start = 1.0 }}", "p".repeat(65)),
            )
            .map(|s| s.replace("formula = \"a +", &format!("formula = \"{} +", "p".repeat(65)))),
            args: args(CHECK),
            expect: &["at most 64"],
            ..base("a parameter name of 65 characters")
        },
        Case {
            study: replace(
                "contours = { grid = 7 }",
                "contours = { grid = 7, pairs = [[\"a\", \"b\", \"tau\"]] }",
            ),
            expect: &["pair 1 names 3", "exactly two"],
            ..base("a contour pair of three names")
        },
        Case {
            study: replace(
                "contours = { grid = 7 }",
                "contours = { grid = 7, pairs = [[\"a\"]] }",
            ),
            expect: &["pair 1 names 1", "exactly two"],
            ..base("a contour pair of one name")
        },
        Case {
            study: replace(
                "contours = { grid = 7 }",
                "contours = { grid = 7, pairs = [[\"a\", \"b\"], [\"b\", \"a\"]] }",
            ),
            expect: &["audit.contours.pairs[1]", "already maps"],
            ..base("a contour pair given twice")
        },
        Case {
            study: replace("x = \"t\"", "x = []"),
            args: args(CHECK),
            expect: &["data.x", "names no column (`x = []`), yet the formula uses `t`"],
            ..base("x = [] with a formula that uses a column")
        },
        Case {
            study: replace("a = { start = 1.0 }", "a = { start = 1.0, fixed = true }").map(|s| {
                s.replace("b = { start = 4.0 }", "b = { start = 4.0, fixed = true }")
                    .replace("max = 100 }", "max = 100, fixed = true }")
            }),
            expect: &["parameters", "fixes every parameter"],
            ..base("every parameter fixed")
        },
        // ---- line ends ----------------------------------------------------------
        Case {
            study: Some(STUDY.replace('\n', "\r")),
            args: args(CHECK),
            expect: &["study.toml, line 1", "carriage return without a line feed"],
            ..base("a study file with old Mac line ends")
        },
        Case {
            csv: Some(csv_rows().replace('\n', "\r").into_bytes()),
            args: args(FIT),
            code: 0,
            expect: &["\"converged\": true"],
            ..base("a data file with old Mac line ends")
        },
        // ---- numbers that overflow at the start --------------------------------
        Case {
            csv: csv_with(|l| l[3] = "1.0,1.797e308,0.01".into()),
            args: args(CHECK),
            expect: &["d.csv, line 4, column 2", "overflows"],
            ..base("a y cell of 1.797e308 (check)")
        },
        Case {
            csv: csv_with(|l| l[3] = "1.0,1.797e308,0.01".into()),
            expect: &["d.csv, line 4, column 2", "weighted residual"],
            ..base("a y cell of 1.797e308 (audit)")
        },
        Case {
            csv: csv_with(|l| l[5] = "2.0,2.85,1e-320".into()),
            args: args(FIT),
            expect: &["d.csv, line 6, column 3", "sigma"],
            ..base("a sigma of 1e-320")
        },
        Case {
            csv: csv_with(|l| l[2] = "0.5,4.9,1e-160".into()),
            args: args(CHECK),
            expect: &["d.csv, line 3, column 3", "1/sigma^2 overflows"],
            ..base("a sigma of 1e-160 (its square underflows)")
        },
        Case {
            study: replace("sigma = \"u\"", "sigma = 1.0"),
            csv: csv_with(|l| {
                l[1] = "0,1e154,0.01".into();
                l[2] = "0.5,1e154,0.01".into();
            }),
            args: args(CHECK),
            expect: &["d.csv", "chi-squared at the start values overflows"],
            ..base("residuals whose squares sum past the largest double")
        },
        // ---- control characters and long values --------------------------------
        Case {
            study: replace(
                "title = \"catalogue base\"",
                "title = \"red \\u001b[31m alarm \\u0007 bell\"",
            ),
            args: args(CHECK),
            code: 0,
            expect: &["red \u{fffd}[31m alarm \u{fffd} bell"],
            forbid: &["\u{1b}", "\u{7}"],
            ..base("escape and bell in the title (check)")
        },
        Case {
            study: replace("title = \"catalogue base\"", "title = \"a\\u202Eb\\u000Bc\""),
            args: args(FIT),
            code: 0,
            expect: &["\"converged\": true"],
            forbid: &["\u{202e}", "\u{b}"],
            ..base("bidi override and vertical tab in the title (fit)")
        },
        Case {
            study: replace("y = \"y\"", "y = \"q\\u001b[2J\""),
            args: args(CHECK),
            expect: &["data.y", "q\u{fffd}[2J"],
            forbid: &["\u{1b}"],
            ..base("an escape sequence in an unknown y column")
        },
        Case {
            study: replace("title =", "\"k\\u0007\" = 1\ntitle ="),
            args: args(CHECK),
            expect: &["study.toml", "k\u{fffd}"],
            forbid: &["\u{7}"],
            ..base("a bell in an unknown key")
        },
        Case {
            study: replace("a = { start = 1.0 }", "\"a\\u0000\" = { start = 1.0 }"),
            args: args(CHECK),
            expect: &["parameters.a\u{fffd}", "not a name"],
            forbid: &["\u{0}"],
            ..base("a NUL in a parameter name")
        },
        Case {
            args: args(&["fit", "ghost\u{1b}[2J.toml"]),
            expect: &["ghost\\u{1b}[2J.toml"],
            forbid: &["\u{1b}"],
            ..base("an escape sequence in a missing study file's name")
        },
        Case {
            csv: csv_with(|l| l[0] = format!("t,y,u,{}", "h".repeat(10_000_000))),
            args: args(CHECK),
            expect: &["d.csv, line 1, column 4", "a header has at most 1000"],
            ..base("a 10 MB header cell")
        },
        Case {
            study: replace(
                "title = \"catalogue base\"",
                &format!("title = \"{}\"", "T".repeat(2000)),
            ),
            args: args(CHECK),
            expect: &["title", "at most 1000"],
            ..base("a title of 2000 characters")
        },
        Case {
            study: replace("y = \"y\"", &format!("y = \"{}\"", "Y".repeat(2000))),
            args: args(CHECK),
            expect: &["data.y", "longer than 1000"],
            ..base("a y column name of 2000 characters")
        },
        Case {
            study: Some(format!(
                "{STUDY}[[inverse]]\nname = \"{}\"\ny = 3.0\n",
                "s".repeat(2000)
            )),
            args: args(CHECK),
            expect: &["inverse[0].name", "longer than 1000"],
            ..base("a sample name of 2000 characters")
        },
        Case {
            csv: csv_with(|l| l[4] = "1.5,\u{1b}[31m3.2,0.01".into()),
            args: args(CHECK),
            expect: &["d.csv, line 5, column 2"],
            forbid: &["\u{1b}"],
            ..base("an escape sequence in a numeric cell")
        },
        // ---- flags --------------------------------------------------------------
        Case {
            args: args(&["audit", "STUDY", "--out", "OUT", "--only", ""]),
            expect: &["--only", "unknown diagnostic"],
            ..base("--only with an empty name")
        },
        Case {
            args: args(&["audit", "STUDY", "--out", "OUT", "--seed", "1.5"]),
            expect: &["--seed"],
            ..base("--seed that is not a whole number")
        },
        Case {
            args: args(&["audit", "STUDY", "--out", "OUT", "--replicates", "1e3"]),
            expect: &["--replicates", "not a positive whole number"],
            ..base("--replicates in exponent notation")
        },
    ]
}

/// Every path under `root` with its kind and, for regular files, bytes
/// (FIFOs and devices are never opened).
fn snapshot(root: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    let mut out = BTreeMap::new();
    let mut stack = vec![root.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            let meta = std::fs::symlink_metadata(&p).unwrap();
            let rel = p.strip_prefix(root).unwrap().to_path_buf();
            if meta.is_dir() {
                out.insert(rel, b"<dir>".to_vec());
                stack.push(p);
            } else if meta.is_file() {
                out.insert(rel, std::fs::read(&p).unwrap());
            } else {
                out.insert(rel, b"<special>".to_vec());
            }
        }
    }
    out
}

#[test]
fn second_wave_bad_inputs_exit_2_name_the_culprit_and_change_nothing() {
    let cases = cases();
    let failing = cases.iter().filter(|c| c.code != 0).count();
    assert!(
        failing >= 60,
        "the second wave keeps at least 60 bad inputs, has {failing}"
    );
    let mut failures = Vec::new();
    for case in &cases {
        let tmp = tempfile::tempdir().unwrap();
        let dir = tmp.path();
        let study = dir.join("study.toml");
        std::fs::write(&study, case.study.clone().unwrap_or_else(|| STUDY.to_string())).unwrap();
        std::fs::write(
            dir.join("d.csv"),
            case.csv.clone().unwrap_or_else(|| csv_rows().into_bytes()),
        )
        .unwrap();
        (case.prep)(dir);
        let out = dir.join("out");
        let before = snapshot(dir);
        let args: Vec<String> = case
            .args
            .iter()
            .map(|a| match a.as_str() {
                "STUDY" => study.display().to_string(),
                "OUT" => out.display().to_string(),
                "DIR" => dir.display().to_string(),
                other => other.to_string(),
            })
            .collect();
        let output = Command::cargo_bin("fitaudit")
            .unwrap()
            .current_dir(dir)
            .args(&args)
            .timeout(std::time::Duration::from_secs(120))
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
        for needle in case.forbid {
            if text.contains(needle) {
                problems.push(format!("output contains {needle:?}"));
            }
        }
        if text.contains("panicked") {
            problems.push("panicked".into());
        }
        if case.code != 0 {
            // Bounded messages (a 10 MB header is not echoed) without raw
            // control characters other than line ends.
            if output.stderr.len() > 20_000 {
                problems.push(format!("a message of {} bytes", output.stderr.len()));
            }
            if let Some(c) = String::from_utf8_lossy(&output.stderr)
                .chars()
                .find(|c| c.is_control() && *c != '\n')
            {
                problems.push(format!("raw control character {:?} in the message", c));
            }
            let after = snapshot(dir);
            if after != before {
                let added: Vec<_> = after.keys().filter(|k| !before.contains_key(*k)).collect();
                let removed: Vec<_> = before.keys().filter(|k| !after.contains_key(*k)).collect();
                problems.push(format!(
                    "the folder changed: added {added:?}, removed {removed:?}"
                ));
            }
        }
        if !problems.is_empty() {
            let shown: String = text.trim().chars().take(600).collect();
            failures.push(format!(
                "{}: {}\n    output: {}",
                case.name,
                problems.join("; "),
                shown
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

/// `--only profile,profile` runs and records the profile once.
#[test]
fn a_repeated_diagnostic_is_run_once() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    std::fs::write(dir.join("study.toml"), STUDY).unwrap();
    std::fs::write(dir.join("d.csv"), csv_rows()).unwrap();
    let out = Command::cargo_bin("fitaudit")
        .unwrap()
        .current_dir(dir)
        .args([
            "audit",
            "study.toml",
            "--out",
            "rep",
            "--quiet",
            "--only",
            "profile,profile",
        ])
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("rep/results.json")).unwrap()).unwrap();
    assert_eq!(json["diagnostics_run"], serde_json::json!(["profile"]));
}

/// Control characters of a title and a header never reach the report raw:
/// every SVG parses as XML and no file holds ESC, BEL, NUL or VT.
#[test]
fn control_characters_never_reach_the_report() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let study = STUDY
        .replace(
            "title = \"catalogue base\"",
            "title = \"T\\u001b[31m\\u0007\\u0000\\u000b end\"",
        )
        .replace("y = \"y\"", "y = \"resp\\u0007\"");
    std::fs::write(dir.join("study.toml"), study).unwrap();
    std::fs::write(
        dir.join("d.csv"),
        csv_rows().replacen("t,y,u", "t,resp\u{7},u", 1),
    )
    .unwrap();
    let out = Command::cargo_bin("fitaudit")
        .unwrap()
        .current_dir(dir)
        .args([
            "audit",
            "study.toml",
            "--out",
            "rep",
            "--quiet",
            "--only",
            "profile",
        ])
        .output()
        .unwrap();
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let files = snapshot(&dir.join("rep"));
    assert!(files.len() > 5, "{:?}", files.keys());
    for (path, bytes) in files {
        if bytes == b"<dir>" {
            continue;
        }
        let text = String::from_utf8(bytes).unwrap();
        for bad in ['\u{1b}', '\u{7}', '\u{0}', '\u{b}'] {
            assert!(!text.contains(bad), "{} holds {bad:?}", path.display());
        }
        if path.extension().is_some_and(|e| e == "svg") {
            assert!(roxmltree::Document::parse(&text).is_ok(), "{}", path.display());
        }
    }
    let html = std::fs::read_to_string(dir.join("rep/report.html")).unwrap();
    assert!(html.contains("T\u{fffd}[31m"), "the title is shown, neutralised");
}

/// A full standard output (`> /dev/full`) is an error naming standard output.
#[cfg(target_os = "linux")]
#[test]
fn a_full_stdout_is_named() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    std::fs::write(dir.join("study.toml"), STUDY).unwrap();
    std::fs::write(dir.join("d.csv"), csv_rows()).unwrap();
    let full = std::fs::OpenOptions::new().write(true).open("/dev/full").unwrap();
    let out = std::process::Command::new(assert_cmd::cargo::cargo_bin("fitaudit"))
        .current_dir(dir)
        .args(["fit", "study.toml"])
        .stdout(full)
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{err}");
    assert!(
        err.contains("standard output") && err.contains("No space left"),
        "{err}"
    );
}
