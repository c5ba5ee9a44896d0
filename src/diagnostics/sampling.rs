//! Space-filling designs for the multi-start search: Latin hypercube
//! sampling of the unit cube and the map from the unit interval onto a
//! parameter's sampling range (linear or logarithmic).

use rand::seq::SliceRandom;
use rand::Rng;
use serde::{Deserialize, Serialize};

/// A Latin hypercube design of `n` points in the unit cube `[0, 1)^dims`,
/// returned as `points[i][d]`.
///
/// Each axis is cut into `n` equal strata; on every axis each stratum holds
/// exactly one point. The stratum of point `i` on axis `d` is a random
/// permutation of `0..n` (one permutation per axis, drawn afresh), and the
/// point lies at a uniformly random position inside its stratum (McKay,
/// Beckman & Conover 1979, Technometrics 21:239-245; from memory).
///
/// All numbers come from `rng`, axis by axis, so the same generator state
/// gives the same design.
pub fn latin_hypercube<R: Rng + ?Sized>(n: usize, dims: usize, rng: &mut R) -> Vec<Vec<f64>> {
    let mut points = vec![vec![0.0; dims]; n];
    let mut perm: Vec<usize> = (0..n).collect();
    let nf = n as f64;
    for d in 0..dims {
        for (i, p) in perm.iter_mut().enumerate() {
            *p = i;
        }
        perm.shuffle(rng);
        for (point, &k) in points.iter_mut().zip(perm.iter()) {
            let u: f64 = rng.gen();
            let mut x = (k as f64 + u) / nf;
            // (k + u) / n may round up onto the next stratum's edge when u is
            // within an ulp of 1; keep the point inside its own stratum.
            if stratum(x, n) != k {
                x = (k as f64 + 0.5) / nf;
            }
            point[d] = x;
        }
    }
    points
}

/// The stratum (`0..n`) of a unit-interval coordinate `u` when the interval
/// is cut into `n` equal strata.
pub fn stratum(u: f64, n: usize) -> usize {
    if n == 0 {
        return 0;
    }
    let s = (u * n as f64).floor();
    if s <= 0.0 {
        0
    } else {
        (s as usize).min(n - 1)
    }
}

/// How a unit-interval coordinate is spread over a sampling range.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Scale {
    /// Uniform in the value.
    Linear,
    /// Uniform in the logarithm of the value (needs `0 < low`).
    Log,
}

/// A sampling range `[low, high]` with its scale.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Interval {
    /// Lower end.
    pub low: f64,
    /// Upper end.
    pub high: f64,
    /// Linear or logarithmic.
    pub scale: Scale,
}

impl Interval {
    /// A single value (a fixed parameter): every coordinate maps onto it.
    pub fn point(value: f64) -> Self {
        Interval {
            low: value,
            high: value,
            scale: Scale::Linear,
        }
    }

    /// Maps `u` in `[0, 1]` onto the range; the result lies in `[low, high]`.
    pub fn map(&self, u: f64) -> f64 {
        let u = u.clamp(0.0, 1.0);
        let v = match self.scale {
            Scale::Linear => self.low + u * (self.high - self.low),
            Scale::Log => {
                let (a, b) = (self.low.ln(), self.high.ln());
                (a + u * (b - a)).exp()
            }
        };
        v.clamp(self.low, self.high)
    }

    /// Inverse of [`Interval::map`]: the unit coordinate of `value`
    /// (0 for a single-value range).
    pub fn unmap(&self, value: f64) -> f64 {
        if self.high <= self.low {
            return 0.0;
        }
        let u = match self.scale {
            Scale::Linear => (value - self.low) / (self.high - self.low),
            Scale::Log => (value.ln() - self.low.ln()) / (self.high.ln() - self.low.ln()),
        };
        u.clamp(0.0, 1.0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::{stream, Stream};

    #[test]
    fn map_and_unmap_are_inverse() {
        // Mathematical identity: unmap(map(u)) = u on both scales.
        let lin = Interval {
            low: -2.0,
            high: 6.0,
            scale: Scale::Linear,
        };
        let log = Interval {
            low: 1e-3,
            high: 10.0,
            scale: Scale::Log,
        };
        for &u in &[0.0, 0.125, 0.5, 0.9, 1.0] {
            assert!((lin.unmap(lin.map(u)) - u).abs() < 1e-12);
            assert!((log.unmap(log.map(u)) - u).abs() < 1e-12);
        }
        // The midpoint of a log range is the geometric mean: sqrt(1e-3 * 10) = 0.1.
        assert!((log.map(0.5) - 0.1).abs() < 1e-12);
        assert_eq!(lin.map(0.5), 2.0);
    }

    #[test]
    fn design_uses_every_stratum_once() {
        let mut rng = stream(3, Stream::Other(11), 0);
        let pts = latin_hypercube(17, 3, &mut rng);
        for d in 0..3 {
            let mut seen = [false; 17];
            for p in &pts {
                let s = stratum(p[d], 17);
                assert!(!seen[s]);
                seen[s] = true;
            }
            assert!(seen.iter().all(|&b| b));
        }
    }
}
