//! Reader for the NIST StRD nonlinear-regression data files (`.dat`) and the
//! 27 models of that suite as native closures with analytic gradients.
//!
//! Source of the files and the model formulas: NIST Information Technology
//! Laboratory, Statistical Reference Datasets, Nonlinear Regression; the
//! files themselves are read from the shared reference folder, never copied
//! into the repository.
#![allow(dead_code)]

use std::f64::consts::PI;
use std::path::{Path, PathBuf};

/// One parsed StRD problem.
#[derive(Debug, Clone)]
pub struct NistProblem {
    /// Data set name (file stem).
    pub name: String,
    /// Parameter names (`b1`, `b2`, ...).
    pub params: Vec<String>,
    /// The two certified starting points.
    pub starts: [Vec<f64>; 2],
    /// Certified parameter values.
    pub certified: Vec<f64>,
    /// Certified standard deviations of the parameters.
    pub certified_sd: Vec<f64>,
    /// Certified residual sum of squares.
    pub rss: f64,
    /// Response column.
    pub y: Vec<f64>,
    /// Predictor columns.
    pub x: Vec<Vec<f64>>,
}

/// What went wrong reading a file (with the line to look at).
#[derive(Debug)]
pub struct ReadError {
    /// File.
    pub file: PathBuf,
    /// 1-based line, when known.
    pub line: Option<usize>,
    /// What.
    pub message: String,
}

fn num(tok: &str) -> Option<f64> {
    tok.parse::<f64>().ok()
}

/// Parses one `.dat` file.
pub fn read(path: &Path) -> Result<NistProblem, ReadError> {
    let err = |line: Option<usize>, message: String| ReadError {
        file: path.to_path_buf(),
        line,
        message,
    };
    let text = std::fs::read_to_string(path).map_err(|e| err(None, e.to_string()))?;
    let lines: Vec<&str> = text.lines().map(|l| l.trim_end_matches('\r')).collect();
    let mut params = Vec::new();
    let mut s1 = Vec::new();
    let mut s2 = Vec::new();
    let mut cert = Vec::new();
    let mut sd = Vec::new();
    let mut rss = None;
    let mut data_line = None;
    for (i, line) in lines.iter().enumerate() {
        let t = line.trim();
        // "b1 =   1    500    2.3894212918E+02  2.7070075241E+00"
        if let Some((lhs, rhs)) = t.split_once('=') {
            let lhs = lhs.trim();
            if lhs.starts_with('b') && lhs[1..].chars().all(|c| c.is_ascii_digit()) && lhs.len() > 1 {
                let toks: Vec<f64> = rhs.split_whitespace().filter_map(num).collect();
                if toks.len() == 4 {
                    params.push(lhs.to_string());
                    s1.push(toks[0]);
                    s2.push(toks[1]);
                    cert.push(toks[2]);
                    sd.push(toks[3]);
                    continue;
                }
            }
        }
        if let Some(rest) = t.strip_prefix("Residual Sum of Squares:") {
            rss = num(rest.trim());
        }
        if let Some(rest) = t.strip_prefix("Data:") {
            // The column header: names only ("y  x" or "y  x1  x2").
            let toks: Vec<&str> = rest.split_whitespace().collect();
            if !toks.is_empty() && toks[0] == "y" && toks.iter().all(|s| num(s).is_none()) {
                data_line = Some((i, toks.len() - 1));
            }
        }
    }
    let rss = rss.ok_or_else(|| err(None, "no 'Residual Sum of Squares:' line".into()))?;
    let (start, nx) = data_line.ok_or_else(|| err(None, "no 'Data:  y  x' header".into()))?;
    if params.is_empty() {
        return Err(err(None, "no starting values".into()));
    }
    let mut y = Vec::new();
    let mut x = vec![Vec::new(); nx];
    for (i, line) in lines.iter().enumerate().skip(start + 1) {
        let t = line.trim();
        if t.is_empty() {
            continue;
        }
        let toks: Option<Vec<f64>> = t.split_whitespace().map(num).collect();
        match toks {
            Some(v) if v.len() == nx + 1 => {
                y.push(v[0]);
                for (c, val) in x.iter_mut().zip(v[1..].iter()) {
                    c.push(*val);
                }
            }
            _ => return Err(err(Some(i + 1), format!("bad data row: {t}"))),
        }
    }
    let name = path
        .file_stem()
        .map(|s| s.to_string_lossy().to_string())
        .unwrap_or_default();
    Ok(NistProblem {
        name,
        params,
        starts: [s1, s2],
        certified: cert,
        certified_sd: sd,
        rss,
        y,
        x,
    })
}

/// The folder of the StRD files: `FITAUDIT_NIST_DIR`, else
/// `../shared/reference/nist-strd-nls` relative to the crate root.
pub fn data_dir() -> PathBuf {
    match std::env::var_os("FITAUDIT_NIST_DIR") {
        Some(d) => PathBuf::from(d),
        None => Path::new(env!("CARGO_MANIFEST_DIR")).join("../shared/reference/nist-strd-nls"),
    }
}

/// A per-point model: `f(b, x_row, grad) -> value`.
pub type PointFn = fn(&[f64], &[f64], &mut [f64]) -> f64;

/// One model of the suite.
#[derive(Clone)]
pub struct NistModel {
    /// Data set name.
    pub name: &'static str,
    /// Parameter count.
    pub n_params: usize,
    /// Value and gradient.
    pub f: PointFn,
    /// The formula, as in the file (with `ln(y)` as the response of Nelson).
    pub formula: &'static str,
    /// The file's response is `y` but the model is for `ln(y)`.
    pub log_response: bool,
}

fn misra1a(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let e = (-b[1] * x[0]).exp();
    g[0] = 1.0 - e;
    g[1] = b[0] * x[0] * e;
    b[0] * (1.0 - e)
}

fn chwirut(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let x = x[0];
    let e = (-b[0] * x).exp();
    let q = b[1] + b[2] * x;
    let f = e / q;
    g[0] = -x * f;
    g[1] = -f / q;
    g[2] = -x * f / q;
    f
}

fn lanczos(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let x = x[0];
    let mut f = 0.0;
    for k in 0..3 {
        let e = (-b[2 * k + 1] * x).exp();
        g[2 * k] = e;
        g[2 * k + 1] = -b[2 * k] * x * e;
        f += b[2 * k] * e;
    }
    f
}

fn gauss(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let x = x[0];
    let e = (-b[1] * x).exp();
    g[0] = e;
    g[1] = -b[0] * x * e;
    let mut f = b[0] * e;
    for (a, c, w) in [(2, 3, 4), (5, 6, 7)] {
        let u = x - b[c];
        let ee = (-(u * u) / (b[w] * b[w])).exp();
        g[a] = ee;
        g[c] = b[a] * ee * 2.0 * u / (b[w] * b[w]);
        g[w] = b[a] * ee * 2.0 * u * u / (b[w] * b[w] * b[w]);
        f += b[a] * ee;
    }
    f
}

fn danwood(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let p = x[0].powf(b[1]);
    g[0] = p;
    g[1] = b[0] * p * x[0].ln();
    b[0] * p
}

fn misra1b(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let t = 1.0 + b[1] * x[0] / 2.0;
    g[0] = 1.0 - t.powi(-2);
    g[1] = b[0] * x[0] * t.powi(-3);
    b[0] * (1.0 - t.powi(-2))
}

/// Ratio of polynomials: numerator degree `nn - 1` over `1 + ...` of
/// degree `nd`.
fn rational(b: &[f64], x: f64, nn: usize, nd: usize, g: &mut [f64]) -> f64 {
    let mut num = 0.0;
    let mut p = 1.0;
    for bk in b.iter().take(nn) {
        num += bk * p;
        p *= x;
    }
    let mut den = 1.0;
    let mut p = x;
    for k in 0..nd {
        den += b[nn + k] * p;
        p *= x;
    }
    let mut p = 1.0;
    for gk in g.iter_mut().take(nn) {
        *gk = p / den;
        p *= x;
    }
    let f = num / den;
    let mut p = x;
    for k in 0..nd {
        g[nn + k] = -f * p / den;
        p *= x;
    }
    f
}

fn kirby2(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    rational(b, x[0], 3, 2, g)
}

fn cubic_ratio(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    rational(b, x[0], 4, 3, g)
}

fn nelson(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let e = (-b[2] * x[1]).exp();
    g[0] = 1.0;
    g[1] = -x[0] * e;
    g[2] = b[1] * x[0] * x[1] * e;
    b[0] - b[1] * x[0] * e
}

fn mgh17(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let x = x[0];
    let e4 = (-x * b[3]).exp();
    let e5 = (-x * b[4]).exp();
    g[0] = 1.0;
    g[1] = e4;
    g[2] = e5;
    g[3] = -b[1] * x * e4;
    g[4] = -b[2] * x * e5;
    b[0] + b[1] * e4 + b[2] * e5
}

fn misra1c(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let t = 1.0 + 2.0 * b[1] * x[0];
    let r = t.powf(-0.5);
    g[0] = 1.0 - r;
    g[1] = b[0] * x[0] * r / t;
    b[0] * (1.0 - r)
}

fn misra1d(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let x = x[0];
    let q = 1.0 + b[1] * x;
    g[0] = b[1] * x / q;
    g[1] = b[0] * x / (q * q);
    b[0] * b[1] * x / q
}

fn roszman1(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let x = x[0];
    let dx = x - b[3];
    let w = b[2] / dx;
    let datan = 1.0 / (1.0 + w * w);
    g[0] = 1.0;
    g[1] = -x;
    g[2] = -datan / dx / PI;
    g[3] = -datan * b[2] / (dx * dx) / PI;
    b[0] - b[1] * x - w.atan() / PI
}

fn enso(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let x = x[0];
    let t = 2.0 * PI * x / 12.0;
    g[0] = 1.0;
    g[1] = t.cos();
    g[2] = t.sin();
    let mut f = b[0] + b[1] * t.cos() + b[2] * t.sin();
    for (p, c, s) in [(3, 4, 5), (6, 7, 8)] {
        let th = 2.0 * PI * x / b[p];
        let dth = -2.0 * PI * x / (b[p] * b[p]);
        let (sn, cs) = th.sin_cos();
        g[c] = cs;
        g[s] = sn;
        g[p] = (-b[c] * sn + b[s] * cs) * dth;
        f += b[c] * cs + b[s] * sn;
    }
    f
}

fn mgh09(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let x = x[0];
    let n = x * x + x * b[1];
    let d = x * x + x * b[2] + b[3];
    g[0] = n / d;
    g[1] = b[0] * x / d;
    g[2] = -b[0] * n * x / (d * d);
    g[3] = -b[0] * n / (d * d);
    b[0] * n / d
}

fn rat42(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let e = (b[1] - b[2] * x[0]).exp();
    let q = 1.0 + e;
    g[0] = 1.0 / q;
    g[1] = -b[0] * e / (q * q);
    g[2] = b[0] * x[0] * e / (q * q);
    b[0] / q
}

fn mgh10(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let q = x[0] + b[2];
    let e = (b[1] / q).exp();
    g[0] = e;
    g[1] = b[0] * e / q;
    g[2] = -b[0] * e * b[1] / (q * q);
    b[0] * e
}

fn eckerle4(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let u = (x[0] - b[2]) / b[1];
    let e = (-0.5 * u * u).exp();
    g[0] = e / b[1];
    g[1] = b[0] * e / (b[1] * b[1]) * (u * u - 1.0);
    g[2] = b[0] / b[1] * e * u / b[1];
    b[0] / b[1] * e
}

fn rat43(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let e = (b[1] - b[2] * x[0]).exp();
    let t = 1.0 + e;
    let p = t.powf(-1.0 / b[3]);
    g[0] = p;
    g[1] = -b[0] / b[3] * p / t * e;
    g[2] = b[0] / b[3] * p / t * e * x[0];
    g[3] = b[0] * p * t.ln() / (b[3] * b[3]);
    b[0] * p
}

fn bennett5(b: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let t = b[1] + x[0];
    let p = t.powf(-1.0 / b[2]);
    g[0] = p;
    g[1] = -b[0] / b[2] * p / t;
    g[2] = b[0] * p * t.ln() / (b[2] * b[2]);
    b[0] * p
}

macro_rules! m {
    ($name:expr, $n:expr, $f:expr, $formula:expr) => {
        NistModel {
            name: $name,
            n_params: $n,
            f: $f,
            formula: $formula,
            log_response: false,
        }
    };
}

const GAUSS: &str = "b1*exp(-b2*x) + b3*exp(-(x-b4)^2/b5^2) + b6*exp(-(x-b7)^2/b8^2)";
const LANCZOS: &str = "b1*exp(-b2*x) + b3*exp(-b4*x) + b5*exp(-b6*x)";
const CUBIC: &str = "(b1 + b2*x + b3*x^2 + b4*x^3) / (1 + b5*x + b6*x^2 + b7*x^3)";

/// The 27 models, in the NIST order of difficulty (lower, average, higher).
pub fn models() -> Vec<NistModel> {
    vec![
        m!("Misra1a", 2, misra1a, "b1*(1-exp(-b2*x))"),
        m!("Chwirut2", 3, chwirut, "exp(-b1*x)/(b2+b3*x)"),
        m!("Chwirut1", 3, chwirut, "exp(-b1*x)/(b2+b3*x)"),
        m!("Lanczos3", 6, lanczos, LANCZOS),
        m!("Gauss1", 8, gauss, GAUSS),
        m!("Gauss2", 8, gauss, GAUSS),
        m!("DanWood", 2, danwood, "b1*x^b2"),
        m!("Misra1b", 2, misra1b, "b1*(1-(1+b2*x/2)^(-2))"),
        m!("Kirby2", 5, kirby2, "(b1 + b2*x + b3*x^2) / (1 + b4*x + b5*x^2)"),
        m!("Hahn1", 7, cubic_ratio, CUBIC),
        NistModel {
            name: "Nelson",
            n_params: 3,
            f: nelson,
            formula: "b1 - b2*x1*exp(-b3*x2)",
            log_response: true,
        },
        m!("MGH17", 5, mgh17, "b1 + b2*exp(-x*b4) + b3*exp(-x*b5)"),
        m!("Lanczos1", 6, lanczos, LANCZOS),
        m!("Lanczos2", 6, lanczos, LANCZOS),
        m!("Gauss3", 8, gauss, GAUSS),
        m!("Misra1c", 2, misra1c, "b1*(1-(1+2*b2*x)^(-0.5))"),
        m!("Misra1d", 2, misra1d, "b1*b2*x*((1+b2*x)^(-1))"),
        m!("Roszman1", 4, roszman1, "b1 - b2*x - atan(b3/(x-b4))/pi"),
        m!(
            "ENSO",
            9,
            enso,
            "b1 + b2*cos(2*pi*x/12) + b3*sin(2*pi*x/12) + b5*cos(2*pi*x/b4) + b6*sin(2*pi*x/b4) \
             + b8*cos(2*pi*x/b7) + b9*sin(2*pi*x/b7)"
        ),
        m!("MGH09", 4, mgh09, "b1*(x^2+x*b2) / (x^2+x*b3+b4)"),
        m!("Thurber", 7, cubic_ratio, CUBIC),
        m!("BoxBOD", 2, misra1a, "b1*(1-exp(-b2*x))"),
        m!("Rat42", 3, rat42, "b1 / (1+exp(b2-b3*x))"),
        m!("MGH10", 3, mgh10, "b1 * exp(b2/(x+b3))"),
        m!("Eckerle4", 3, eckerle4, "(b1/b2) * exp(-0.5*((x-b3)/b2)^2)"),
        m!("Rat43", 4, rat43, "b1 / ((1+exp(b2-b3*x))^(1/b4))"),
        m!("Bennett5", 3, bennett5, "b1 * (b2+x)^(-1/b3)"),
    ]
}

/// Log relative error, `-log10(|est - cert| / |cert|)`, capped at 11 (and
/// at 0 below).
pub fn lre(est: f64, cert: f64) -> f64 {
    if !est.is_finite() {
        return 0.0;
    }
    let d = (est - cert).abs();
    if d == 0.0 {
        return 11.0;
    }
    let v = if cert == 0.0 {
        -d.log10()
    } else {
        -(d / cert.abs()).log10()
    };
    v.clamp(0.0, 11.0)
}
