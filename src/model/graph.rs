//! The expression graph: hash-consed nodes (so equal subexpressions are one
//! node), algebraic simplification and constant folding at construction,
//! and symbolic differentiation with respect to each parameter.
//!
//! Children always have smaller ids than their parents, so every pass over
//! the graph is a loop over ids, never a recursion (deep formulas cannot
//! overflow the stack).

use super::ops::{self, Bin, Un};
use std::collections::HashMap;

/// Index of a node in the graph.
pub(crate) type Id = u32;

/// One node of the expression graph.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub(crate) enum Node {
    /// A constant, stored as its bit pattern so nodes can be hashed.
    Const(u64),
    /// Parameter `j` of the parameter vector.
    Param(u32),
    /// Independent variable `k` (a data column).
    Var(u32),
    /// One-argument operation.
    Un(Un, Id),
    /// Two-argument operation.
    Bin(Bin, Id, Id),
    /// `if p <= q { t } else { f }`.
    Select(Id, Id, Id, Id),
}

impl Node {
    /// Children of the node (up to four), in a fixed array.
    pub(crate) fn children(&self) -> ([Id; 4], usize) {
        match *self {
            Node::Const(_) | Node::Param(_) | Node::Var(_) => ([0; 4], 0),
            Node::Un(_, a) => ([a, 0, 0, 0], 1),
            Node::Bin(_, a, b) => ([a, b, 0, 0], 2),
            Node::Select(p, q, t, f) => ([p, q, t, f], 4),
        }
    }
}

/// The leaf a derivative is taken with respect to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Wrt {
    /// Parameter `j`.
    Param(u32),
    /// Independent variable (data column) `k`.
    Var(u32),
}

/// The graph under construction.
#[derive(Debug, Default, Clone)]
pub(crate) struct Graph {
    nodes: Vec<Node>,
    /// Whether a node depends on a data column (else it is one number per evaluation).
    column: Vec<bool>,
    map: HashMap<Node, Id>,
}

impl Graph {
    /// An empty graph.
    pub(crate) fn new() -> Self {
        Graph::default()
    }

    /// The node with id `id`.
    pub(crate) fn node(&self, id: Id) -> Node {
        self.nodes[id as usize]
    }

    /// Whether the node varies with the data point.
    pub(crate) fn is_column(&self, id: Id) -> bool {
        self.column[id as usize]
    }

    /// The constant value of a node, if it is a constant.
    pub(crate) fn as_const(&self, id: Id) -> Option<f64> {
        match self.nodes[id as usize] {
            Node::Const(bits) => Some(f64::from_bits(bits)),
            _ => None,
        }
    }

    fn is_value(&self, id: Id, v: f64) -> bool {
        self.as_const(id) == Some(v)
    }

    fn intern(&mut self, node: Node) -> Id {
        if let Some(&id) = self.map.get(&node) {
            return id;
        }
        let (ch, k) = node.children();
        let column = matches!(node, Node::Var(_)) || ch[..k].iter().any(|&c| self.column[c as usize]);
        let id = self.nodes.len() as Id;
        self.nodes.push(node);
        self.column.push(column);
        self.map.insert(node, id);
        id
    }

    /// A constant node.
    pub(crate) fn konst(&mut self, v: f64) -> Id {
        self.intern(Node::Const(v.to_bits()))
    }

    /// A parameter node.
    pub(crate) fn param(&mut self, j: usize) -> Id {
        self.intern(Node::Param(j as u32))
    }

    /// A data-column node.
    pub(crate) fn var(&mut self, k: usize) -> Id {
        self.intern(Node::Var(k as u32))
    }

    /// `a + b`, simplified.
    pub(crate) fn add(&mut self, a: Id, b: Id) -> Id {
        self.bin(Bin::Add, a, b)
    }

    /// `a - b`, simplified.
    pub(crate) fn sub(&mut self, a: Id, b: Id) -> Id {
        self.bin(Bin::Sub, a, b)
    }

    /// `a * b`, simplified.
    pub(crate) fn mul(&mut self, a: Id, b: Id) -> Id {
        self.bin(Bin::Mul, a, b)
    }

    /// `a / b`, simplified.
    pub(crate) fn div(&mut self, a: Id, b: Id) -> Id {
        self.bin(Bin::Div, a, b)
    }

    /// `-a`, simplified.
    pub(crate) fn neg(&mut self, a: Id) -> Id {
        self.un(Un::Neg, a)
    }

    /// A one-argument operation, folded and simplified.
    pub(crate) fn un(&mut self, op: Un, a: Id) -> Id {
        if let Some(x) = self.as_const(a) {
            return self.konst(op.apply(x));
        }
        if op == Un::Neg {
            match self.node(a) {
                // -(-x) = x
                Node::Un(Un::Neg, x) => return x,
                // -(x - y) = y - x
                Node::Bin(Bin::Sub, x, y) => return self.sub(y, x),
                // -(s * c) = (-s) * c when s is one number per evaluation
                Node::Bin(Bin::Mul, s, c) if !self.is_column(s) && self.is_column(c) => {
                    let ns = self.neg(s);
                    return self.mul(ns, c);
                }
                _ => {}
            }
        }
        self.intern(Node::Un(op, a))
    }

    /// A two-argument operation, folded and simplified.
    pub(crate) fn bin(&mut self, op: Bin, a: Id, b: Id) -> Id {
        if let (Some(x), Some(y)) = (self.as_const(a), self.as_const(b)) {
            return self.konst(op.apply(x, y));
        }
        match op {
            Bin::Add => {
                if self.is_value(a, 0.0) {
                    return b;
                }
                if self.is_value(b, 0.0) {
                    return a;
                }
                if let Node::Un(Un::Neg, y) = self.node(b) {
                    return self.sub(a, y);
                }
                if let Node::Un(Un::Neg, x) = self.node(a) {
                    return self.sub(b, x);
                }
            }
            Bin::Sub => {
                if self.is_value(b, 0.0) {
                    return a;
                }
                if self.is_value(a, 0.0) {
                    return self.neg(b);
                }
                if let Node::Un(Un::Neg, y) = self.node(b) {
                    return self.add(a, y);
                }
            }
            Bin::Mul => {
                if self.is_value(a, 0.0) || self.is_value(b, 0.0) {
                    return self.konst(0.0);
                }
                if self.is_value(a, 1.0) {
                    return b;
                }
                if self.is_value(b, 1.0) {
                    return a;
                }
                if self.is_value(a, -1.0) {
                    return self.neg(b);
                }
                if self.is_value(b, -1.0) {
                    return self.neg(a);
                }
                // Scalars first so that scalar-times-column forms are canonical.
                let (a, b) = self.order(a, b);
                let (na, nb) = (self.node(a), self.node(b));
                if let (Node::Un(Un::Neg, x), Node::Un(Un::Neg, y)) = (na, nb) {
                    return self.mul(x, y);
                }
                // After ordering, `b` is a column whenever either operand is.
                if self.is_column(b) {
                    let ca = self.is_column(a);
                    match (na, nb) {
                        // s * (-c) = (-s) * c: the negation moves to the scalar.
                        (_, Node::Un(Un::Neg, y)) if !ca => {
                            let ns = self.neg(a);
                            return self.mul(ns, y);
                        }
                        // (-c1) * c2 = -(c1 * c2) and c1 * (-c2) = -(c1 * c2)
                        (Node::Un(Un::Neg, x), _) if ca => {
                            let p = self.mul(x, b);
                            return self.neg(p);
                        }
                        (_, Node::Un(Un::Neg, y)) => {
                            let p = self.mul(a, y);
                            return self.neg(p);
                        }
                        _ => {}
                    }
                }
                // s1 * (s2 * c) = (s1 * s2) * c
                if !self.is_column(a) {
                    if let Node::Bin(Bin::Mul, s2, c) = nb {
                        if !self.is_column(s2) && self.is_column(c) {
                            let s = self.mul(a, s2);
                            return self.mul(s, c);
                        }
                    }
                }
                return self.intern(Node::Bin(Bin::Mul, a, b));
            }
            Bin::Div => {
                if self.is_value(b, 1.0) {
                    return a;
                }
                if self.is_value(a, 0.0) {
                    return self.konst(0.0);
                }
                if self.is_value(b, -1.0) {
                    return self.neg(a);
                }
            }
            Bin::Pow => {
                if self.is_value(b, 1.0) {
                    return a;
                }
                if self.is_value(b, 0.0) {
                    return self.konst(1.0);
                }
            }
            Bin::MulZ => {
                if self.is_value(a, 0.0) {
                    return self.konst(0.0);
                }
                if self.as_const(a).is_some() {
                    return self.mul(a, b);
                }
            }
            Bin::Atan2 | Bin::Min | Bin::Max => {}
        }
        let (a, b) = if op.commutes() { self.order(a, b) } else { (a, b) };
        self.intern(Node::Bin(op, a, b))
    }

    /// Canonical operand order of a commuting operation: constants, then
    /// other scalars, then columns; ties by id.
    fn order(&self, a: Id, b: Id) -> (Id, Id) {
        let rank = |g: &Graph, id: Id| -> (u8, Id) {
            let r = if g.as_const(id).is_some() {
                0
            } else if !g.is_column(id) {
                1
            } else {
                2
            };
            (r, id)
        };
        if rank(self, b) < rank(self, a) {
            (b, a)
        } else {
            (a, b)
        }
    }

    /// `if p <= q { t } else { f }`, folded.
    pub(crate) fn select(&mut self, p: Id, q: Id, t: Id, f: Id) -> Id {
        if t == f {
            return t;
        }
        if let (Some(x), Some(y)) = (self.as_const(p), self.as_const(q)) {
            return if x <= y { t } else { f };
        }
        self.intern(Node::Select(p, q, t, f))
    }

    /// Marks every node reachable from `roots`.
    pub(crate) fn reachable(&self, roots: &[Id]) -> Vec<bool> {
        let top = roots.iter().copied().max().map_or(0, |r| r as usize + 1);
        let mut mark = vec![false; top];
        for &r in roots {
            mark[r as usize] = true;
        }
        for id in (0..top).rev() {
            if mark[id] {
                let (ch, k) = self.nodes[id].children();
                for &c in &ch[..k] {
                    mark[c as usize] = true;
                }
            }
        }
        mark
    }

    /// Which parameters (of `n_params`) the node `root` depends on.
    pub(crate) fn parameters_used(&self, root: Id, n_params: usize) -> Vec<bool> {
        let mark = self.reachable(&[root]);
        let mut used = vec![false; n_params];
        for (id, &m) in mark.iter().enumerate() {
            if let (true, Node::Param(j)) = (m, self.nodes[id]) {
                used[j as usize] = true;
            }
        }
        used
    }

    /// For each parameter (of `n_params`), the data column it is a position
    /// on: the one column `k` it is subtracted from, or compared with
    /// (`x - p`, `p - x`, `min`/`max` of the two, a comparison), anywhere in
    /// the expression of `root`. `None` when it never meets a column that
    /// way or meets two different columns.
    pub(crate) fn positions(&self, root: Id, n_params: usize) -> Vec<Option<usize>> {
        let mark = self.reachable(&[root]);
        // 0: not seen; k + 1: column k; usize::MAX: conflicting columns.
        let mut role = vec![0usize; n_params];
        let pair = |a: Id, b: Id| -> Option<(usize, usize)> {
            match (self.nodes[a as usize], self.nodes[b as usize]) {
                (Node::Var(k), Node::Param(j)) | (Node::Param(j), Node::Var(k)) => {
                    Some((j as usize, k as usize))
                }
                _ => None,
            }
        };
        for (id, &m) in mark.iter().enumerate() {
            if !m {
                continue;
            }
            let found = match self.nodes[id] {
                Node::Bin(Bin::Sub | Bin::Min | Bin::Max, a, b) => pair(a, b),
                Node::Select(p, q, _, _) => pair(p, q),
                _ => None,
            };
            if let Some((j, k)) = found {
                if j < n_params {
                    role[j] = match role[j] {
                        0 => k + 1,
                        r if r == k + 1 => r,
                        _ => usize::MAX,
                    };
                }
            }
        }
        role.into_iter()
            .map(|r| {
                if r == 0 || r == usize::MAX {
                    None
                } else {
                    Some(r - 1)
                }
            })
            .collect()
    }

    /// The derivative of `root` with respect to parameter `j`, as a node of
    /// the same graph (sharing subexpressions with the value).
    pub(crate) fn derivative(&mut self, root: Id, j: usize) -> Id {
        self.derivative_wrt(root, Wrt::Param(j as u32))
    }

    /// The derivative of `root` with respect to independent variable `k`
    /// (data column `k`), as a node of the same graph. Applied to a
    /// parameter derivative it gives the mixed second derivative.
    #[allow(dead_code)] // first callers: errors in x and the curvature measures
    pub(crate) fn derivative_var(&mut self, root: Id, k: usize) -> Id {
        self.derivative_wrt(root, Wrt::Var(k as u32))
    }

    /// The derivative of `root` with respect to one leaf. Works on any node,
    /// including derivative nodes, so second derivatives are two calls.
    pub(crate) fn derivative_wrt(&mut self, root: Id, wrt: Wrt) -> Id {
        let top = root as usize + 1;
        let mark = self.reachable(&[root]);
        let zero = self.konst(0.0);
        let one = self.konst(1.0);
        // d[id] for the original nodes 0..top.
        let mut d: Vec<Id> = vec![zero; top];
        for id in 0..top {
            if !mark[id] {
                continue;
            }
            let node = self.nodes[id];
            let me = id as Id;
            d[id] = match node {
                Node::Const(_) => zero,
                Node::Param(k) => {
                    if wrt == Wrt::Param(k) {
                        one
                    } else {
                        zero
                    }
                }
                Node::Var(k) => {
                    if wrt == Wrt::Var(k) {
                        one
                    } else {
                        zero
                    }
                }
                Node::Un(op, a) => {
                    let da = d[a as usize];
                    if da == zero {
                        zero
                    } else {
                        self.d_un(op, me, a, da)
                    }
                }
                Node::Bin(op, a, b) => {
                    let (da, db) = (d[a as usize], d[b as usize]);
                    if da == zero && db == zero {
                        zero
                    } else {
                        self.d_bin(op, me, a, b, da, db)
                    }
                }
                Node::Select(p, q, t, f) => {
                    let (dt, df) = (d[t as usize], d[f as usize]);
                    self.select(p, q, dt, df)
                }
            };
        }
        d[root as usize]
    }

    /// Derivative of `me = op(a)` given `da = a'`.
    fn d_un(&mut self, op: Un, me: Id, a: Id, da: Id) -> Id {
        match op {
            Un::Neg => self.neg(da),
            Un::Exp => self.mul(me, da),
            Un::Ln => self.div(da, a),
            Un::Log10 => {
                let c = self.konst(std::f64::consts::LN_10);
                let den = self.mul(c, a);
                self.div(da, den)
            }
            Un::Sqrt => {
                let two = self.konst(2.0);
                let den = self.mul(two, me);
                self.div(da, den)
            }
            Un::Abs => {
                let s = self.un(Un::Sign, a);
                self.mul(s, da)
            }
            Un::Sign => self.konst(0.0),
            Un::Sin => {
                let c = self.un(Un::Cos, a);
                self.mul(c, da)
            }
            Un::Cos => {
                let s = self.un(Un::Sin, a);
                let p = self.mul(s, da);
                self.neg(p)
            }
            Un::Tan => {
                let one = self.konst(1.0);
                let t2 = self.mul(me, me);
                let f = self.add(one, t2);
                self.mul(f, da)
            }
            Un::Asin | Un::Acos => {
                let one = self.konst(1.0);
                let a2 = self.mul(a, a);
                let r = self.sub(one, a2);
                let s = self.un(Un::Sqrt, r);
                let q = self.div(da, s);
                if op == Un::Asin {
                    q
                } else {
                    self.neg(q)
                }
            }
            Un::Atan => {
                let one = self.konst(1.0);
                let a2 = self.mul(a, a);
                let den = self.add(one, a2);
                self.div(da, den)
            }
            Un::Sinh => {
                let c = self.un(Un::Cosh, a);
                self.mul(c, da)
            }
            Un::Cosh => {
                let s = self.un(Un::Sinh, a);
                self.mul(s, da)
            }
            Un::Tanh => {
                let one = self.konst(1.0);
                let t2 = self.mul(me, me);
                let f = self.sub(one, t2);
                self.mul(f, da)
            }
            Un::Erf | Un::Erfc => {
                // erf'(x) = 2/sqrt(pi) exp(-x^2)
                let c = self.konst(std::f64::consts::FRAC_2_SQRT_PI);
                let a2 = self.mul(a, a);
                let na2 = self.neg(a2);
                let e = self.un(Un::Exp, na2);
                let g = self.mul(c, e);
                let p = self.mul(g, da);
                if op == Un::Erf {
                    p
                } else {
                    self.neg(p)
                }
            }
        }
    }

    /// Derivative of `me = a op b` given `da`, `db` (not both zero).
    fn d_bin(&mut self, op: Bin, me: Id, a: Id, b: Id, da: Id, db: Id) -> Id {
        let zero = self.konst(0.0);
        match op {
            Bin::Add => self.add(da, db),
            Bin::Sub => self.sub(da, db),
            Bin::Mul | Bin::MulZ => {
                let l = self.mul(da, b);
                let r = self.mul(a, db);
                self.add(l, r)
            }
            Bin::Div => {
                // (a/b)' = (a' - (a/b) b') / b
                if db == zero {
                    self.div(da, b)
                } else {
                    let t = self.mul(me, db);
                    let num = self.sub(da, t);
                    self.div(num, b)
                }
            }
            Bin::Pow => {
                if db == zero {
                    // b a^(b-1) a': valid for negative bases with integer b.
                    let one = self.konst(1.0);
                    let bm1 = self.sub(b, one);
                    let p = self.bin(Bin::Pow, a, bm1);
                    let f = self.mul(b, p);
                    self.mul(f, da)
                } else {
                    // a^b (b' ln a + b a'/a); the first term is 0 wherever
                    // b' = 0, also for a negative base (where ln a is NaN).
                    let ln = self.un(Un::Ln, a);
                    let t1 = self.bin(Bin::MulZ, db, ln);
                    let inner = if da == zero {
                        t1
                    } else {
                        let q = self.div(da, a);
                        let t2 = self.mul(b, q);
                        self.add(t1, t2)
                    };
                    self.mul(me, inner)
                }
            }
            Bin::Atan2 => {
                // atan2(y, x)' = (x y' - y x') / (x^2 + y^2)
                let (y, x, dy, dx) = (a, b, da, db);
                let l = self.mul(x, dy);
                let r = self.mul(y, dx);
                let num = self.sub(l, r);
                let x2 = self.mul(x, x);
                let y2 = self.mul(y, y);
                let den = self.add(x2, y2);
                self.div(num, den)
            }
            Bin::Min => self.select(a, b, da, db),
            Bin::Max => self.select(b, a, da, db),
        }
    }

    /// Evaluates a node at one point by a loop over ids (used for tests of
    /// the tape and for single-point convenience evaluation).
    #[allow(dead_code)]
    pub(crate) fn eval_point(&self, roots: &[Id], params: &[f64], x: &[f64]) -> Vec<f64> {
        let top = roots.iter().copied().max().map_or(0, |r| r as usize + 1);
        let mut v = vec![0.0; top];
        for id in 0..top {
            v[id] = match self.nodes[id] {
                Node::Const(bits) => f64::from_bits(bits),
                Node::Param(j) => params[j as usize],
                Node::Var(k) => x[k as usize],
                Node::Un(op, a) => op.apply(v[a as usize]),
                Node::Bin(op, a, b) => op.apply(v[a as usize], v[b as usize]),
                Node::Select(p, q, t, f) => {
                    ops::select(v[p as usize], v[q as usize], v[t as usize], v[f as usize])
                }
            };
        }
        roots.iter().map(|&r| v[r as usize]).collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// d/dx and d2/(dx db) of `b * x^2 + c` against the closed forms
    /// `2 b x` and `2 x` (calculus identity).
    #[test]
    fn derivative_with_respect_to_a_variable_and_mixed() {
        let mut g = Graph::new();
        let (b, c, x) = (g.param(0), g.param(1), g.var(0));
        let xx = g.mul(x, x);
        let bxx = g.mul(b, xx);
        let f = g.add(bxx, c);
        let fx = g.derivative_var(f, 0);
        let fxb = g.derivative(fx, 0);
        let fxc = g.derivative(fx, 1);
        let v = g.eval_point(&[fx, fxb, fxc], &[1.5, -4.0], &[3.0]);
        assert_eq!(v, vec![9.0, 6.0, 0.0]);
    }
}
