//! Contour lines of a function sampled on a rectangular grid by marching
//! squares: each cell's corners are classified against the level, crossing
//! points are placed on the cell edges by linear interpolation, and the
//! per-cell segments are joined through their shared edges into polylines.
//!
//! Saddle cells (opposite corners on the same side) are resolved by the mean
//! of the four corners: the corners on the other side of the level than the
//! centre are cut off. Cells with a non-finite corner are skipped, so lines
//! end at holes of the grid.

use std::collections::HashMap;

/// A crossing point: which grid edge it lies on and where.
#[derive(Debug, Clone, Copy)]
struct Crossing {
    edge: usize,
    point: [f64; 2],
}

/// Contour polylines of `z` at `level`. `z[r][c]` is the value at
/// `(x[c], y[r])`; `x` and `y` must be strictly increasing (or decreasing).
/// Closed lines repeat their first vertex at the end.
///
/// Rows of `z` shorter than `x`, or fewer rows than `y`, are treated as holes.
pub fn contour_paths(x: &[f64], y: &[f64], z: &[Vec<f64>], level: f64) -> Vec<Vec<[f64; 2]>> {
    contour_paths_with(x, y, z, level, &|_, _| None)
}

/// Saddle cells of the grid at any of `levels`: `(r, c)` of each cell
/// whose diagonal corners lie on one side of a level and the other two on
/// the other side, so that the corners alone cannot tell whether the two
/// low corners are joined (a valley running diagonally through the cell)
/// or the two high ones.
pub fn saddle_cells(z: &[Vec<f64>], levels: &[f64]) -> Vec<(usize, usize)> {
    let mut out = Vec::new();
    for r in 0..z.len().saturating_sub(1) {
        let n = z[r].len().min(z[r + 1].len());
        for c in 0..n.saturating_sub(1) {
            let zs = [z[r][c], z[r][c + 1], z[r + 1][c + 1], z[r + 1][c]];
            if zs.iter().any(|v| !v.is_finite()) {
                continue;
            }
            let saddle = levels.iter().any(|&l| {
                let a = zs.map(|v| v >= l);
                a[0] == a[2] && a[1] == a[3] && a[0] != a[1]
            });
            if saddle {
                out.push((r, c));
            }
        }
    }
    out
}

/// [`contour_paths`] with the value at the centre of a cell supplied by
/// `centre(r, c)` where known (a refined lattice point): a saddle cell is
/// resolved by that value instead of the mean of its corners.
pub fn contour_paths_with(
    x: &[f64],
    y: &[f64],
    z: &[Vec<f64>],
    level: f64,
    centre: &dyn Fn(usize, usize) -> Option<f64>,
) -> Vec<Vec<[f64; 2]>> {
    let nx = x.len();
    let ny = y.len();
    if nx < 2 || ny < 2 || !level.is_finite() {
        return Vec::new();
    }
    let value =
        |r: usize, c: usize| -> f64 { z.get(r).and_then(|row| row.get(c)).copied().unwrap_or(f64::NAN) };
    // Edge ids: the horizontal edge from node (r, c) to (r, c + 1) is
    // 2 * (r * nx + c); the vertical edge from (r, c) to (r + 1, c) is that plus one.
    let h_edge = |r: usize, c: usize| 2 * (r * nx + c);
    let v_edge = |r: usize, c: usize| 2 * (r * nx + c) + 1;
    let cross = |edge: usize, p0: [f64; 2], z0: f64, p1: [f64; 2], z1: f64| -> Crossing {
        let t = ((level - z0) / (z1 - z0)).clamp(0.0, 1.0);
        Crossing {
            edge,
            point: [p0[0] + t * (p1[0] - p0[0]), p0[1] + t * (p1[1] - p0[1])],
        }
    };

    let mut segments: Vec<[Crossing; 2]> = Vec::new();
    for r in 0..ny - 1 {
        for c in 0..nx - 1 {
            // Corners counter-clockwise from the lower left.
            let zs = [value(r, c), value(r, c + 1), value(r + 1, c + 1), value(r + 1, c)];
            if zs.iter().any(|v| !v.is_finite()) {
                continue;
            }
            let ps = [
                [x[c], y[r]],
                [x[c + 1], y[r]],
                [x[c + 1], y[r + 1]],
                [x[c], y[r + 1]],
            ];
            let above = zs.map(|v| v >= level);
            // Edge k joins corner k and corner k + 1 (mod 4):
            // 0 bottom, 1 right, 2 top, 3 left.
            let ids = [h_edge(r, c), v_edge(r, c + 1), h_edge(r + 1, c), v_edge(r, c)];
            let edge_crossing = |k: usize| -> Option<Crossing> {
                let (i, j) = (k, (k + 1) % 4);
                (above[i] != above[j]).then(|| cross(ids[k], ps[i], zs[i], ps[j], zs[j]))
            };
            let crossings: Vec<(usize, Crossing)> = (0..4)
                .filter_map(|k| edge_crossing(k).map(|cr| (k, cr)))
                .collect();
            match crossings.len() {
                2 => segments.push([crossings[0].1, crossings[1].1]),
                4 => {
                    // Saddle: cut off the two corners whose side differs
                    // from the centre's. Corner k touches edges k - 1 and k.
                    let mid = centre(r, c)
                        .filter(|v| v.is_finite())
                        .unwrap_or(zs.iter().sum::<f64>() / 4.0);
                    let centre_above = mid >= level;
                    let all: [Crossing; 4] = [crossings[0].1, crossings[1].1, crossings[2].1, crossings[3].1];
                    for k in 0..4 {
                        if above[k] != centre_above {
                            segments.push([all[(k + 3) % 4], all[k]]);
                        }
                    }
                }
                _ => {}
            }
        }
    }
    join(segments)
}

/// Joins segments that share an edge crossing into polylines.
fn join(segments: Vec<[Crossing; 2]>) -> Vec<Vec<[f64; 2]>> {
    // Each edge crossing belongs to at most two segments (the two cells
    // sharing the edge).
    let mut by_edge: HashMap<usize, Vec<usize>> = HashMap::with_capacity(segments.len() * 2);
    for (s, seg) in segments.iter().enumerate() {
        for end in seg {
            by_edge.entry(end.edge).or_default().push(s);
        }
    }
    let mut used = vec![false; segments.len()];
    let mut lines = Vec::new();
    // The unused segment beyond `edge`, other than `from`.
    let next = |edge: usize, from: usize, used: &[bool]| -> Option<usize> {
        by_edge
            .get(&edge)
            .and_then(|list| list.iter().copied().find(|&s| s != from && !used[s]))
    };
    for first in 0..segments.len() {
        if used[first] {
            continue;
        }
        used[first] = true;
        let [a, b] = segments[first];
        // Walk forward from b, then backward from a.
        let mut forward = vec![a, b];
        let (mut edge, mut from) = (b.edge, first);
        while let Some(s) = next(edge, from, &used) {
            used[s] = true;
            let seg = segments[s];
            let far = if seg[0].edge == edge { seg[1] } else { seg[0] };
            forward.push(far);
            edge = far.edge;
            from = s;
        }
        let closed = forward.len() > 2 && forward.last().map(|c| c.edge) == Some(a.edge);
        let mut backward = Vec::new();
        if !closed {
            let (mut edge, mut from) = (a.edge, first);
            while let Some(s) = next(edge, from, &used) {
                used[s] = true;
                let seg = segments[s];
                let far = if seg[0].edge == edge { seg[1] } else { seg[0] };
                backward.push(far);
                edge = far.edge;
                from = s;
            }
        }
        let mut path: Vec<[f64; 2]> = backward
            .iter()
            .rev()
            .chain(forward.iter())
            .map(|c| c.point)
            .collect();
        path.dedup();
        if closed && path.first() != path.last() {
            let p = path[0];
            path.push(p);
        }
        if path.len() >= 2 {
            lines.push(path);
        }
    }
    lines
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid(lo: f64, hi: f64, n: usize) -> Vec<f64> {
        (0..n)
            .map(|i| lo + (hi - lo) * i as f64 / (n - 1) as f64)
            .collect()
    }

    #[test]
    fn circle_of_a_paraboloid() {
        // f = x^2 + y^2 at level r^2 is the circle of radius r (identity).
        // Linear interpolation of f along an edge of length h misplaces the
        // crossing by at most h^2 / (8 r) to first order.
        let (n, r) = (41, 1.3);
        let x = grid(-2.0, 2.0, n);
        let y = grid(-2.0, 2.0, n);
        let h = 4.0 / (n - 1) as f64;
        let z: Vec<Vec<f64>> = y
            .iter()
            .map(|&yv| x.iter().map(|&xv| xv * xv + yv * yv).collect())
            .collect();
        let paths = contour_paths(&x, &y, &z, r * r);
        assert_eq!(paths.len(), 1, "one closed line");
        let p = &paths[0];
        assert_eq!(p.first(), p.last(), "closed");
        assert!(p.len() > 60, "{} vertices", p.len());
        let bound = h * h / (8.0 * r) * 1.5;
        let worst = p
            .iter()
            .map(|v| ((v[0] * v[0] + v[1] * v[1]).sqrt() - r).abs())
            .fold(0.0, f64::max);
        assert!(worst <= bound, "worst radial error {worst} > {bound}");
        // Vertices go round the circle once: the total turning angle is 2 pi.
        let mut turn = 0.0;
        for w in p.windows(2) {
            let a0 = w[0][1].atan2(w[0][0]);
            let a1 = w[1][1].atan2(w[1][0]);
            let mut d = a1 - a0;
            if d > std::f64::consts::PI {
                d -= 2.0 * std::f64::consts::PI;
            }
            if d < -std::f64::consts::PI {
                d += 2.0 * std::f64::consts::PI;
            }
            turn += d;
        }
        assert!(
            (turn.abs() - 2.0 * std::f64::consts::PI).abs() < 1e-9,
            "turn {turn}"
        );
    }

    #[test]
    fn two_separate_circles_and_an_open_arc() {
        // min of two paraboloids centred at (+-1.5, 0), level 0.5^2: two
        // disjoint circles (identity). A circle cut by the grid edge gives
        // an open line.
        let x = grid(-3.0, 3.0, 61);
        let y = grid(-1.0, 1.0, 21);
        let f = |a: f64, b: f64| ((a - 1.5).powi(2) + b * b).min((a + 1.5).powi(2) + b * b);
        let z: Vec<Vec<f64>> = y.iter().map(|&b| x.iter().map(|&a| f(a, b)).collect()).collect();
        let paths = contour_paths(&x, &y, &z, 0.25);
        assert_eq!(paths.len(), 2);
        for p in &paths {
            assert_eq!(p.first(), p.last());
        }
        let open = contour_paths(&x, &y, &z, 1.44);
        // Radius 1.2 circles leave the strip |y| <= 1: four open arcs.
        assert_eq!(open.len(), 4);
        for p in &open {
            assert_ne!(p.first(), p.last());
        }
    }

    #[test]
    fn saddle_and_holes() {
        // z = x * y at level 0 on a grid whose nodes avoid the axes: the
        // zero set is the two axes; the saddle cell at the origin joins the
        // four rays into two corner-shaped lines (identity). With
        // level 0.5 and a NaN hole the lines stop at the hole without panicking.
        let x = grid(-1.05, 1.05, 8);
        let y = grid(-1.05, 1.05, 8);
        let mut z: Vec<Vec<f64>> = y.iter().map(|&b| x.iter().map(|&a| a * b).collect()).collect();
        let paths = contour_paths(&x, &y, &z, 0.0);
        for p in &paths {
            for v in p {
                assert!(v[0].abs() < 1e-12 || v[1].abs() < 1e-12, "{v:?}");
            }
        }
        assert_eq!(paths.len(), 2);
        z[3][3] = f64::NAN;
        let with_hole = contour_paths(&x, &y, &z, 0.5);
        assert!(with_hole
            .iter()
            .flatten()
            .all(|v| v[0].is_finite() && v[1].is_finite()));
        assert!(contour_paths(&x, &y, &z, f64::NAN).is_empty());
    }
}
