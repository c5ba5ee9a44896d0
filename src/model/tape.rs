//! Lowering of the expression graph to a flat instruction tape, and its
//! evaluation over blocks of data points.
//!
//! A program has two parts. The *scalar program* computes, once per
//! evaluation, every node that does not depend on the data (parameters,
//! constants and their combinations, e.g. `-k1` or `2*pi/b`). The *column
//! program* runs once per block of [`BLOCK`] points; each instruction loops
//! over the block, so dispatch costs one branch per instruction per block
//! and the inner loops are plain arithmetic the compiler can vectorise.
//! Working registers are blocks of `BLOCK` numbers, reused once their value
//! is dead, so they stay in cache.

use super::graph::{Graph, Id, Node};
use super::ops::{self, Bin, Un};
use super::NonFinite;

/// Number of data points per block.
pub(crate) const BLOCK: usize = 128;

/// An operand of a `Sel` instruction: a register or a scalar slot.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Src {
    R(u32),
    S(u32),
}

/// A column instruction. `d` is the destination register, `a`, `b`, `c`
/// are registers, `s` is a scalar slot.
#[derive(Debug, Clone, PartialEq)]
enum Ins {
    /// d = x[k]
    Var { d: u32, k: u32 },
    /// d = op(a)
    Un { op: Un, d: u32, a: u32 },
    /// d = a op b
    RR { op: Bin, d: u32, a: u32, b: u32 },
    /// d = s op b
    SR { op: Bin, d: u32, s: u32, b: u32 },
    /// d = a op s
    RS { op: Bin, d: u32, a: u32, s: u32 },
    /// d = if p <= q { t } else { f }
    Sel { d: u32, p: Src, q: Src, t: Src, f: Src },
    /// d = exp(s * a)
    ExpSR { d: u32, s: u32, a: u32 },
    /// d = s * a + b
    FmaSRR { d: u32, s: u32, a: u32, b: u32 },
    /// d = a * b + c
    FmaRRR { d: u32, a: u32, b: u32, c: u32 },
    /// d = s * a * b
    MulSRR { d: u32, s: u32, a: u32, b: u32 },
}

impl Ins {
    /// The destination and the register operands, for register allocation.
    fn regs_mut(&mut self) -> (&mut u32, Vec<&mut u32>) {
        match self {
            Ins::Var { d, .. } => (d, vec![]),
            Ins::Un { d, a, .. } => (d, vec![a]),
            Ins::RR { d, a, b, .. } => (d, vec![a, b]),
            Ins::SR { d, b, .. } => (d, vec![b]),
            Ins::RS { d, a, .. } => (d, vec![a]),
            Ins::Sel { d, p, q, t, f } => {
                let mut v = Vec::new();
                for s in [p, q, t, f] {
                    if let Src::R(r) = s {
                        v.push(r);
                    }
                }
                (d, v)
            }
            Ins::ExpSR { d, a, .. } => (d, vec![a]),
            Ins::FmaSRR { d, a, b, .. } => (d, vec![a, b]),
            Ins::FmaRRR { d, a, b, c } => (d, vec![a, b, c]),
            Ins::MulSRR { d, a, b, .. } => (d, vec![a, b]),
        }
    }
}

/// A scalar instruction over scalar slots.
#[derive(Debug, Clone, PartialEq)]
enum SIns {
    Un { op: Un, d: u32, a: u32 },
    Bin { op: Bin, d: u32, a: u32, b: u32 },
    Sel { d: u32, p: u32, q: u32, t: u32, f: u32 },
}

/// Where an output column comes from.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Out {
    /// A register, copied block by block.
    R(u32),
    /// A scalar slot, the same at every point.
    S(u32),
}

/// A compiled program producing a list of output columns.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Program {
    scalar_init: Vec<f64>,
    param_slots: Vec<(u32, u32)>,
    sprog: Vec<SIns>,
    ins: Vec<Ins>,
    n_regs: usize,
    outputs: Vec<Out>,
}

/// How a column node is emitted.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Emit {
    /// Emitted as its own instruction.
    Plain,
    /// Folded into its single user.
    Inlined,
    /// Emitted as a fused instruction that absorbs a child.
    Fused,
}

impl Program {
    /// Lowers the nodes `roots` (output columns, in order) of `g`.
    pub(crate) fn lower(g: &Graph, roots: &[Id]) -> Program {
        let mark = g.reachable(roots);
        let top = mark.len();
        let mut uses = vec![0usize; top];
        let mut is_root = vec![false; top];
        for &r in roots {
            uses[r as usize] += 1;
            is_root[r as usize] = true;
        }
        for (id, &m) in mark.iter().enumerate() {
            if m {
                let (ch, k) = g.node(id as Id).children();
                for &c in &ch[..k] {
                    uses[c as usize] += 1;
                }
            }
        }

        // Scalar part.
        let mut slot = vec![u32::MAX; top];
        let mut scalar_init = Vec::new();
        let mut param_slots = Vec::new();
        let mut sprog = Vec::new();
        for id in 0..top {
            if !mark[id] || g.is_column(id as Id) {
                continue;
            }
            let s = scalar_init.len() as u32;
            slot[id] = s;
            scalar_init.push(0.0);
            let sl = |c: Id| slot[c as usize];
            match g.node(id as Id) {
                Node::Const(bits) => scalar_init[s as usize] = f64::from_bits(bits),
                Node::Param(j) => param_slots.push((s, j)),
                Node::Var(_) => unreachable!("a data column is never a scalar"),
                Node::Un(op, a) => sprog.push(SIns::Un { op, d: s, a: sl(a) }),
                Node::Bin(op, a, b) => sprog.push(SIns::Bin {
                    op,
                    d: s,
                    a: sl(a),
                    b: sl(b),
                }),
                Node::Select(p, q, t, f) => sprog.push(SIns::Sel {
                    d: s,
                    p: sl(p),
                    q: sl(q),
                    t: sl(t),
                    f: sl(f),
                }),
            }
        }

        // Fusion decisions (children before parents, so a child's own
        // state is known when its parent looks at it).
        let mut emit = vec![Emit::Plain; top];
        let col = |id: Id| g.is_column(id);
        let absorbable = |emit: &[Emit], c: Id| {
            uses[c as usize] == 1 && !is_root[c as usize] && emit[c as usize] == Emit::Plain
        };
        let scalar_mul = |c: Id| match g.node(c) {
            Node::Bin(Bin::Mul, s, a) if !col(s) && col(a) => Some((s, a)),
            _ => None,
        };
        let col_mul = |c: Id| match g.node(c) {
            Node::Bin(Bin::Mul, a, b) if col(a) && col(b) => Some((a, b)),
            _ => None,
        };
        for id in 0..top {
            if !mark[id] || !col(id as Id) {
                continue;
            }
            let mut absorb = None;
            match g.node(id as Id) {
                Node::Un(Un::Exp, a) if absorbable(&emit, a) && scalar_mul(a).is_some() => absorb = Some(a),
                Node::Bin(Bin::Add, x, y) if col(x) && col(y) => {
                    for c in [x, y] {
                        if absorb.is_none()
                            && absorbable(&emit, c)
                            && (scalar_mul(c).is_some() || col_mul(c).is_some())
                        {
                            absorb = Some(c);
                        }
                    }
                }
                Node::Bin(Bin::Mul, s, y) if !col(s) && absorbable(&emit, y) && col_mul(y).is_some() => {
                    absorb = Some(y)
                }
                _ => {}
            }
            if let Some(c) = absorb {
                emit[c as usize] = Emit::Inlined;
                emit[id] = Emit::Fused;
            }
        }

        // Column instructions over virtual registers (= node ids).
        let mut ins = Vec::new();
        for id in 0..top {
            if !mark[id] || !col(id as Id) || emit[id] == Emit::Inlined {
                continue;
            }
            let d = id as u32;
            let src = |c: Id| {
                if col(c) {
                    Src::R(c)
                } else {
                    Src::S(slot[c as usize])
                }
            };
            let node = g.node(id as Id);
            let i = match (node, emit[id]) {
                (Node::Var(k), _) => Ins::Var { d, k },
                (Node::Un(Un::Exp, a), Emit::Fused) => {
                    let (s, x) = scalar_mul(a).expect("fusion checked the pattern");
                    Ins::ExpSR {
                        d,
                        s: slot[s as usize],
                        a: x,
                    }
                }
                (Node::Un(op, a), _) => Ins::Un { op, d, a },
                (Node::Bin(Bin::Add, x, y), Emit::Fused) => {
                    let (m, other) = if emit[x as usize] == Emit::Inlined {
                        (x, y)
                    } else {
                        (y, x)
                    };
                    if let Some((s, a)) = scalar_mul(m) {
                        Ins::FmaSRR {
                            d,
                            s: slot[s as usize],
                            a,
                            b: other,
                        }
                    } else {
                        let (a, b) = col_mul(m).expect("fusion checked the pattern");
                        Ins::FmaRRR { d, a, b, c: other }
                    }
                }
                (Node::Bin(Bin::Mul, s, y), Emit::Fused) => {
                    let (a, b) = col_mul(y).expect("fusion checked the pattern");
                    Ins::MulSRR {
                        d,
                        s: slot[s as usize],
                        a,
                        b,
                    }
                }
                (Node::Bin(op, a, b), _) => match (col(a), col(b)) {
                    (true, true) => Ins::RR { op, d, a, b },
                    (false, true) => Ins::SR {
                        op,
                        d,
                        s: slot[a as usize],
                        b,
                    },
                    (true, false) => Ins::RS {
                        op,
                        d,
                        a,
                        s: slot[b as usize],
                    },
                    (false, false) => unreachable!("a column node has a column operand"),
                },
                (Node::Select(p, q, t, f), _) => Ins::Sel {
                    d,
                    p: src(p),
                    q: src(q),
                    t: src(t),
                    f: src(f),
                },
                (Node::Const(_) | Node::Param(_), _) => unreachable!("constants are scalars"),
            };
            ins.push(i);
        }

        // Register allocation by last use; outputs stay live to the end.
        let mut last = vec![usize::MAX; top];
        for (i, inst) in ins.iter_mut().enumerate() {
            let (_, reads) = inst.regs_mut();
            for r in reads {
                last[*r as usize] = i;
            }
        }
        let mut phys = vec![u32::MAX; top];
        let mut free: Vec<u32> = Vec::new();
        let mut n_regs = 0u32;
        for (i, inst) in ins.iter_mut().enumerate() {
            let (d, reads) = inst.regs_mut();
            let p = free.pop().unwrap_or_else(|| {
                n_regs += 1;
                n_regs - 1
            });
            phys[*d as usize] = p;
            *d = p;
            let mut freed: [u32; 4] = [u32::MAX; 4];
            for (k, r) in reads.into_iter().enumerate() {
                let v = *r as usize;
                *r = phys[v];
                if last[v] == i && !is_root[v] && !freed.contains(&phys[v]) {
                    freed[k] = phys[v];
                    free.push(phys[v]);
                }
            }
            // A value never read (possible only for outputs) keeps its register.
        }

        let outputs = roots
            .iter()
            .map(|&r| {
                if col(r) {
                    Out::R(phys[r as usize])
                } else {
                    Out::S(slot[r as usize])
                }
            })
            .collect();
        Program {
            scalar_init,
            param_slots,
            sprog,
            ins,
            n_regs: n_regs as usize,
            outputs,
        }
    }

    /// Number of `f64` the scratch buffer needs.
    pub(crate) fn scratch_len(&self) -> usize {
        self.scalar_init.len() + self.n_regs * BLOCK
    }

    /// Number of column instructions (for tests of the optimiser).
    #[allow(dead_code)]
    pub(crate) fn n_instructions(&self) -> usize {
        self.ins.len()
    }

    /// Evaluates the outputs over all points. Output 0 goes to `values`,
    /// output `1 + j` to column `j` of `jac`.
    pub(crate) fn run(
        &self,
        params: &[f64],
        x: &[&[f64]],
        values: &mut [f64],
        mut jac: Option<&mut [f64]>,
        scratch: &mut Vec<f64>,
    ) -> Result<(), NonFinite> {
        let n = values.len();
        let need = self.scratch_len();
        if scratch.len() < need {
            scratch.resize(need, 0.0);
        }
        let (sc, regs) = scratch[..need].split_at_mut(self.scalar_init.len());
        sc.copy_from_slice(&self.scalar_init);
        for &(s, j) in &self.param_slots {
            sc[s as usize] = params[j as usize];
        }
        for si in &self.sprog {
            match *si {
                SIns::Un { op, d, a } => sc[d as usize] = op.apply(sc[a as usize]),
                SIns::Bin { op, d, a, b } => sc[d as usize] = op.apply(sc[a as usize], sc[b as usize]),
                SIns::Sel { d, p, q, t, f } => {
                    sc[d as usize] =
                        ops::select(sc[p as usize], sc[q as usize], sc[t as usize], sc[f as usize])
                }
            }
        }
        let sc: &[f64] = sc;

        let mut bad: Option<usize> = None;
        for (o, out) in self.outputs.iter().enumerate() {
            if let Out::S(s) = *out {
                let v = sc[s as usize];
                out_col(o, values, &mut jac, n).fill(v);
                if !v.is_finite() && n > 0 {
                    bad = Some(0);
                }
            }
        }

        let mut start = 0;
        while start < n {
            let len = BLOCK.min(n - start);
            for inst in &self.ins {
                exec(inst, regs, sc, x, start, len);
            }
            let mut block_bad: Option<usize> = None;
            for (o, out) in self.outputs.iter().enumerate() {
                if let Out::R(r) = *out {
                    let r = r as usize * BLOCK;
                    let src = &regs[r..r + len];
                    out_col(o, values, &mut jac, n)[start..start + len].copy_from_slice(src);
                    if bad.is_none() && !all_finite(src) {
                        let k = src.iter().position(|v| !v.is_finite()).unwrap_or(0);
                        block_bad = Some(block_bad.map_or(k, |b| b.min(k)));
                    }
                }
            }
            if let (None, Some(k)) = (bad, block_bad) {
                bad = Some(start + k);
            }
            start += len;
        }
        match bad {
            Some(point) => Err(NonFinite { point }),
            None => Ok(()),
        }
    }
}

/// Output column `o`: 0 is `values`, `1 + j` is column `j` of `jac`.
fn out_col<'a>(o: usize, values: &'a mut [f64], jac: &'a mut Option<&mut [f64]>, n: usize) -> &'a mut [f64] {
    if o == 0 {
        values
    } else {
        let j = jac
            .as_deref_mut()
            .expect("derivative outputs need a Jacobian buffer");
        &mut j[(o - 1) * n..o * n]
    }
}

#[inline]
fn all_finite(s: &[f64]) -> bool {
    s.iter().fold(true, |acc, v| acc & v.is_finite())
}

/// Read access to every register except the destination.
struct View<'a> {
    lo: &'a [f64],
    hi: &'a [f64],
    d: usize,
    len: usize,
}

impl View<'_> {
    #[inline(always)]
    fn get(&self, r: u32) -> &[f64] {
        let r = r as usize;
        if r < self.d {
            &self.lo[r * BLOCK..r * BLOCK + self.len]
        } else {
            let o = (r - self.d - 1) * BLOCK;
            &self.hi[o..o + self.len]
        }
    }
}

#[inline(always)]
fn split(regs: &mut [f64], d: u32, len: usize) -> (&mut [f64], View<'_>) {
    let d = d as usize;
    let (lo, rest) = regs.split_at_mut(d * BLOCK);
    let (dst, hi) = rest.split_at_mut(BLOCK);
    (&mut dst[..len], View { lo, hi, d, len })
}

#[inline(always)]
fn k1(d: &mut [f64], a: &[f64], f: impl Fn(f64) -> f64) {
    for (o, &x) in d.iter_mut().zip(a) {
        *o = f(x);
    }
}

#[inline(always)]
fn k2(d: &mut [f64], a: &[f64], b: &[f64], f: impl Fn(f64, f64) -> f64) {
    for ((o, &x), &y) in d.iter_mut().zip(a).zip(b) {
        *o = f(x, y);
    }
}

#[inline(always)]
fn k3(d: &mut [f64], a: &[f64], b: &[f64], c: &[f64], f: impl Fn(f64, f64, f64) -> f64) {
    for (((o, &x), &y), &z) in d.iter_mut().zip(a).zip(b).zip(c) {
        *o = f(x, y, z);
    }
}

macro_rules! un_kernel {
    ($op:expr, $d:expr, $a:expr) => {
        match $op {
            Un::Neg => k1($d, $a, |x| -x),
            Un::Exp => k1($d, $a, f64::exp),
            Un::Ln => k1($d, $a, f64::ln),
            Un::Log10 => k1($d, $a, f64::log10),
            Un::Sqrt => k1($d, $a, f64::sqrt),
            Un::Abs => k1($d, $a, f64::abs),
            Un::Sign => k1($d, $a, ops::sign),
            Un::Sin => k1($d, $a, f64::sin),
            Un::Cos => k1($d, $a, f64::cos),
            Un::Tan => k1($d, $a, f64::tan),
            Un::Asin => k1($d, $a, f64::asin),
            Un::Acos => k1($d, $a, f64::acos),
            Un::Atan => k1($d, $a, f64::atan),
            Un::Sinh => k1($d, $a, f64::sinh),
            Un::Cosh => k1($d, $a, f64::cosh),
            Un::Tanh => k1($d, $a, f64::tanh),
            Un::Erf => k1($d, $a, |x| Un::Erf.apply(x)),
            Un::Erfc => k1($d, $a, |x| Un::Erfc.apply(x)),
        }
    };
}

macro_rules! bin_kernel {
    ($op:expr, $kern:ident, $d:expr, $a:expr, $b:expr) => {
        match $op {
            Bin::Add => $kern($d, $a, $b, |x, y| x + y),
            Bin::Sub => $kern($d, $a, $b, |x, y| x - y),
            Bin::Mul => $kern($d, $a, $b, |x, y| x * y),
            Bin::Div => $kern($d, $a, $b, |x, y| x / y),
            Bin::Pow => $kern($d, $a, $b, ops::pow),
            Bin::Atan2 => $kern($d, $a, $b, f64::atan2),
            Bin::Min => $kern($d, $a, $b, ops::min),
            Bin::Max => $kern($d, $a, $b, ops::max),
        }
    };
}

#[inline(always)]
fn ks_left(d: &mut [f64], s: f64, b: &[f64], f: impl Fn(f64, f64) -> f64) {
    for (o, &y) in d.iter_mut().zip(b) {
        *o = f(s, y);
    }
}

#[inline(always)]
fn ks_right(d: &mut [f64], a: &[f64], s: f64, f: impl Fn(f64, f64) -> f64) {
    for (o, &x) in d.iter_mut().zip(a) {
        *o = f(x, s);
    }
}

/// Runs one column instruction over one block.
fn exec(inst: &Ins, regs: &mut [f64], sc: &[f64], x: &[&[f64]], start: usize, len: usize) {
    match *inst {
        Ins::Var { d, k } => {
            let (dst, _) = split(regs, d, len);
            dst.copy_from_slice(&x[k as usize][start..start + len]);
        }
        Ins::Un { op, d, a } => {
            let (dst, v) = split(regs, d, len);
            un_kernel!(op, dst, v.get(a));
        }
        Ins::RR { op, d, a, b } => {
            let (dst, v) = split(regs, d, len);
            bin_kernel!(op, k2, dst, v.get(a), v.get(b));
        }
        Ins::SR { op, d, s, b } => {
            let (dst, v) = split(regs, d, len);
            bin_kernel!(op, ks_left, dst, sc[s as usize], v.get(b));
        }
        Ins::RS { op, d, a, s } => {
            let (dst, v) = split(regs, d, len);
            let s = sc[s as usize];
            let a = v.get(a);
            if op == Bin::Pow {
                // Decide the power kernel once per block, not per point.
                if s == 2.0 {
                    k1(dst, a, |x| x * x);
                } else if let Some(k) = ops::small_int(s) {
                    k1(dst, a, |x| x.powi(k));
                } else {
                    k1(dst, a, |x| x.powf(s));
                }
            } else {
                bin_kernel!(op, ks_right, dst, a, s);
            }
        }
        Ins::Sel { d, p, q, t, f } => {
            let (dst, v) = split(regs, d, len);
            let at = |s: Src, i: usize| match s {
                Src::R(r) => v.get(r)[i],
                Src::S(k) => sc[k as usize],
            };
            for (i, o) in dst.iter_mut().enumerate() {
                *o = ops::select(at(p, i), at(q, i), at(t, i), at(f, i));
            }
        }
        Ins::ExpSR { d, s, a } => {
            let (dst, v) = split(regs, d, len);
            let s = sc[s as usize];
            k1(dst, v.get(a), |x| (s * x).exp());
        }
        Ins::FmaSRR { d, s, a, b } => {
            let (dst, v) = split(regs, d, len);
            let s = sc[s as usize];
            k2(dst, v.get(a), v.get(b), |x, y| s * x + y);
        }
        Ins::FmaRRR { d, a, b, c } => {
            let (dst, v) = split(regs, d, len);
            k3(dst, v.get(a), v.get(b), v.get(c), |x, y, z| x * y + z);
        }
        Ins::MulSRR { d, s, a, b } => {
            let (dst, v) = split(regs, d, len);
            let s = sc[s as usize];
            k2(dst, v.get(a), v.get(b), |x, y| s * x * y);
        }
    }
}
