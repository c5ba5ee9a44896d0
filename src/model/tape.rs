//! Lowering of the expression graph to a flat instruction tape, and its
//! evaluation over blocks of data points.
//!
//! A program has two parts. The *scalar program* computes, once per
//! evaluation, every node that does not depend on the data (parameters,
//! constants and their combinations, e.g. `-k1` or `2*pi/b`). The *column
//! program* runs once per block of [`BLOCK`] points; each instruction loops
//! over the block, so dispatch costs one branch per instruction per block
//! and the inner loops are plain arithmetic the compiler can vectorise.
//!
//! Operands live in three places: working registers (blocks of `BLOCK`
//! numbers in the scratch buffer, reused once their value is dead, so they
//! stay in cache), the caller's data columns (read in place), and the
//! caller's output buffers (values and Jacobian columns are written in
//! place by the instruction that computes them, and may be read back by
//! later instructions).

use super::graph::{Graph, Id, Node};
use super::ops::{self, Bin, Un};
use super::NonFinite;

/// Number of data points per block.
pub(crate) const BLOCK: usize = 128;

/// Where a column operand lives.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Loc {
    /// Working register.
    R(u32),
    /// Output column: 0 is the values, `1 + j` Jacobian column `j`.
    O(u32),
    /// Data column `k`.
    X(u32),
}

/// An operand of a `Sel` instruction: a column or a scalar slot.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Src {
    C(Loc),
    S(u32),
}

/// A column instruction. `d` is the destination, `a`, `b`, `c` are column
/// operands, `s` is a scalar slot.
#[derive(Debug, Clone, PartialEq)]
enum Ins {
    /// d = a (a data column that is itself an output)
    Copy { d: Loc, a: Loc },
    /// d = op(a)
    Un { op: Un, d: Loc, a: Loc },
    /// d = a op b
    CC { op: Bin, d: Loc, a: Loc, b: Loc },
    /// d = s op b
    SC { op: Bin, d: Loc, s: u32, b: Loc },
    /// d = a op s
    CS { op: Bin, d: Loc, a: Loc, s: u32 },
    /// d = if p <= q { t } else { f }
    Sel { d: Loc, p: Src, q: Src, t: Src, f: Src },
    /// d = exp(s * a)
    ExpSC { d: Loc, s: u32, a: Loc },
    /// d = (s * a) ± b, or b - s * a
    FmaSCC { k: Comb, d: Loc, s: u32, a: Loc, b: Loc },
    /// d = (a * b) ± c, or c - a * b
    FmaCCC { k: Comb, d: Loc, a: Loc, b: Loc, c: Loc },
    /// d = -(a * b)
    NegMulCC { d: Loc, a: Loc, b: Loc },
    /// d = s * (a * b)
    MulSCC { d: Loc, s: u32, a: Loc, b: Loc },
}

impl Ins {
    /// The destination and the column operands, for register allocation.
    fn locs_mut(&mut self) -> (&mut Loc, Vec<&mut Loc>) {
        match self {
            Ins::Copy { d, a } => (d, vec![a]),
            Ins::Un { d, a, .. } => (d, vec![a]),
            Ins::CC { d, a, b, .. } => (d, vec![a, b]),
            Ins::SC { d, b, .. } => (d, vec![b]),
            Ins::CS { d, a, .. } => (d, vec![a]),
            Ins::Sel { d, p, q, t, f } => {
                let mut v = Vec::new();
                for s in [p, q, t, f] {
                    if let Src::C(l) = s {
                        v.push(l);
                    }
                }
                (d, v)
            }
            Ins::ExpSC { d, a, .. } => (d, vec![a]),
            Ins::FmaSCC { d, a, b, .. } => (d, vec![a, b]),
            Ins::FmaCCC { d, a, b, c, .. } => (d, vec![a, b, c]),
            Ins::NegMulCC { d, a, b } => (d, vec![a, b]),
            Ins::MulSCC { d, a, b, .. } => (d, vec![a, b]),
        }
    }
}

/// How a fused product `p` combines with the other operand `c`.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Comb {
    /// p + c
    Add,
    /// p - c
    ProdMinus,
    /// c - p
    MinusProd,
}

/// A scalar instruction over scalar slots.
#[derive(Debug, Clone, PartialEq)]
enum SIns {
    Un { op: Un, d: u32, a: u32 },
    Bin { op: Bin, d: u32, a: u32, b: u32 },
    Sel { d: u32, p: u32, q: u32, t: u32, f: u32 },
}

/// How an output column is produced.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Out {
    /// Written in place by a column instruction.
    Direct,
    /// The same node as an earlier output: copied from it block by block.
    Dup(u32),
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

/// Placeholder location of a node before allocation.
fn node_loc(id: Id) -> Loc {
    Loc::R(id)
}

impl Program {
    /// Lowers the nodes `roots` (output columns, in order) of `g`.
    pub(crate) fn lower(g: &Graph, roots: &[Id]) -> Program {
        let mark = g.reachable(roots);
        let top = mark.len();
        let mut uses = vec![0usize; top];
        // First output of each root node.
        let mut root_out = vec![u32::MAX; top];
        let mut outputs = Vec::with_capacity(roots.len());
        for (o, &r) in roots.iter().enumerate() {
            uses[r as usize] += 1;
            let first = &mut root_out[r as usize];
            outputs.push(if *first == u32::MAX {
                *first = o as u32;
                Out::Direct
            } else {
                Out::Dup(*first)
            });
        }
        let is_root = |id: Id| root_out[id as usize] != u32::MAX;
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
        for (o, &r) in roots.iter().enumerate() {
            if !g.is_column(r) {
                outputs[o] = Out::S(slot[r as usize]);
            }
        }

        // Fusion decisions (children before parents, so a child's own
        // state is known when its parent looks at it).
        let mut emit = vec![Emit::Plain; top];
        let col = |id: Id| g.is_column(id);
        let absorbable =
            |emit: &[Emit], c: Id| uses[c as usize] == 1 && !is_root(c) && emit[c as usize] == Emit::Plain;
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
                Node::Un(Un::Neg, a) if absorbable(&emit, a) && col_mul(a).is_some() => absorb = Some(a),
                Node::Bin(Bin::Add | Bin::Sub, x, y) if col(x) && col(y) => {
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

        // Column instructions over placeholder locations (= node ids).
        let mut ins = Vec::new();
        for id in 0..top {
            if !mark[id] || !col(id as Id) || emit[id] == Emit::Inlined {
                continue;
            }
            let d = node_loc(id as Id);
            let l = node_loc;
            let src = |c: Id| {
                if col(c) {
                    Src::C(l(c))
                } else {
                    Src::S(slot[c as usize])
                }
            };
            let node = g.node(id as Id);
            let i = match (node, emit[id]) {
                // Data columns are read in place; only an output needs a copy.
                (Node::Var(k), _) if is_root(id as Id) => Ins::Copy { d, a: Loc::X(k) },
                (Node::Var(_), _) => continue,
                (Node::Un(Un::Exp, a), Emit::Fused) => {
                    let (s, x) = scalar_mul(a).expect("fusion checked the pattern");
                    Ins::ExpSC {
                        d,
                        s: slot[s as usize],
                        a: l(x),
                    }
                }
                (Node::Un(Un::Neg, m), Emit::Fused) => {
                    let (a, b) = col_mul(m).expect("fusion checked the pattern");
                    Ins::NegMulCC { d, a: l(a), b: l(b) }
                }
                (Node::Un(op, a), _) => Ins::Un { op, d, a: l(a) },
                (Node::Bin(op @ (Bin::Add | Bin::Sub), x, y), Emit::Fused) => {
                    let sub = op == Bin::Sub;
                    let (m, other, k) = if emit[x as usize] == Emit::Inlined {
                        (x, y, if sub { Comb::ProdMinus } else { Comb::Add })
                    } else {
                        (y, x, if sub { Comb::MinusProd } else { Comb::Add })
                    };
                    if let Some((s, a)) = scalar_mul(m) {
                        Ins::FmaSCC {
                            k,
                            d,
                            s: slot[s as usize],
                            a: l(a),
                            b: l(other),
                        }
                    } else {
                        let (a, b) = col_mul(m).expect("fusion checked the pattern");
                        Ins::FmaCCC {
                            k,
                            d,
                            a: l(a),
                            b: l(b),
                            c: l(other),
                        }
                    }
                }
                (Node::Bin(Bin::Mul, s, y), Emit::Fused) => {
                    let (a, b) = col_mul(y).expect("fusion checked the pattern");
                    Ins::MulSCC {
                        d,
                        s: slot[s as usize],
                        a: l(a),
                        b: l(b),
                    }
                }
                (Node::Bin(op, a, b), _) => match (col(a), col(b)) {
                    (true, true) => Ins::CC {
                        op,
                        d,
                        a: l(a),
                        b: l(b),
                    },
                    (false, true) => Ins::SC {
                        op,
                        d,
                        s: slot[a as usize],
                        b: l(b),
                    },
                    (true, false) => Ins::CS {
                        op,
                        d,
                        a: l(a),
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

        // Final locations: outputs in place, data columns in place, other
        // nodes in registers allocated by last use.
        let id_of = |l: &Loc| match *l {
            Loc::R(id) => id as usize,
            _ => usize::MAX,
        };
        let mut last = vec![usize::MAX; top];
        for (i, inst) in ins.iter_mut().enumerate() {
            let (_, reads) = inst.locs_mut();
            for r in reads {
                if let Loc::R(id) = *r {
                    last[id as usize] = i;
                }
            }
        }
        let mut fin: Vec<Option<Loc>> = vec![None; top];
        for id in 0..top {
            if mark[id] && col(id as Id) {
                if is_root(id as Id) {
                    fin[id] = Some(Loc::O(root_out[id]));
                } else if let Node::Var(k) = g.node(id as Id) {
                    fin[id] = Some(Loc::X(k));
                }
            }
        }
        let mut free: Vec<u32> = Vec::new();
        let mut n_regs = 0u32;
        for (i, inst) in ins.iter_mut().enumerate() {
            let (d, reads) = inst.locs_mut();
            let did = id_of(d);
            if fin[did].is_none() {
                let p = free.pop().unwrap_or_else(|| {
                    n_regs += 1;
                    n_regs - 1
                });
                fin[did] = Some(Loc::R(p));
            }
            *d = fin[did].expect("destination placed");
            let mut freed: Vec<usize> = Vec::new();
            for r in reads {
                let Loc::R(rid) = *r else { continue };
                let rid = rid as usize;
                let loc = fin[rid].expect("operands are computed before use");
                *r = loc;
                if let Loc::R(p) = loc {
                    if last[rid] == i && !freed.contains(&rid) {
                        freed.push(rid);
                        free.push(p);
                    }
                }
            }
        }
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
    pub(crate) fn n_instructions(&self) -> usize {
        self.ins.len()
    }

    /// Evaluates the outputs over all points. Output 0 goes to `values`,
    /// output `1 + j` to column `j` of `jac`. `scratch` is grown to at least
    /// `reserve` (the largest need of the programs sharing it), so that
    /// alternating programs does not grow it again.
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn run(
        &self,
        reserve: usize,
        params: &[f64],
        x: &[&[f64]],
        values: &mut [f64],
        jac: Option<&mut [f64]>,
        scratch: &mut Vec<f64>,
    ) -> Result<(), NonFinite> {
        let n = values.len();
        let need = self.scratch_len();
        if scratch.len() < need {
            scratch.resize(need.max(reserve), 0.0);
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
        let mut empty: [f64; 0] = [];
        let jac = match jac {
            Some(j) => j,
            None => &mut empty[..],
        };
        let mut outs = Outs { values, jac, n };

        let mut bad: Option<usize> = None;
        for (o, out) in self.outputs.iter().enumerate() {
            if let Out::S(s) = *out {
                let v = sc[s as usize];
                outs.col_mut(o as u32).fill(v);
                if !v.is_finite() && n > 0 {
                    bad = Some(0);
                }
            }
        }

        let mut start = 0;
        while start < n {
            let len = BLOCK.min(n - start);
            let blk = Block { start, len };
            for inst in &self.ins {
                exec(inst, regs, &mut outs, sc, x, blk);
            }
            let mut block_bad: Option<usize> = None;
            for (o, out) in self.outputs.iter().enumerate() {
                match *out {
                    Out::Direct => {}
                    Out::Dup(from) => {
                        let (dst, rd) = outs.split_out(o as u32, blk);
                        dst.copy_from_slice(rd.out(from));
                    }
                    Out::S(_) => continue,
                }
                if bad.is_none() {
                    let col = &outs.col_mut(o as u32)[start..start + len];
                    if !all_finite(col) {
                        let k = col.iter().position(|v| !v.is_finite()).unwrap_or(0);
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

/// Whether every number is finite: `v * 0` is 0 for finite `v` and NaN
/// otherwise; four independent sums let the loop vectorise.
#[inline]
fn all_finite(s: &[f64]) -> bool {
    let mut acc = [0.0f64; 4];
    let chunks = s.chunks_exact(4);
    let rest = chunks.remainder();
    for c in chunks {
        for k in 0..4 {
            acc[k] += c[k] * 0.0;
        }
    }
    for &v in rest {
        acc[0] += v * 0.0;
    }
    (acc[0] + acc[1]) + (acc[2] + acc[3]) == 0.0
}

/// The current block of points.
#[derive(Clone, Copy)]
struct Block {
    start: usize,
    len: usize,
}

/// The caller's output buffers.
struct Outs<'a> {
    values: &'a mut [f64],
    jac: &'a mut [f64],
    n: usize,
}

impl Outs<'_> {
    /// The whole column of output `o`.
    fn col_mut(&mut self, o: u32) -> &mut [f64] {
        let n = self.n;
        if o == 0 {
            self.values
        } else {
            let o = o as usize;
            &mut self.jac[(o - 1) * n..o * n]
        }
    }

    /// Output `o` over the block, mutable, and read access to the others.
    #[inline(always)]
    fn split_out(&mut self, o: u32, blk: Block) -> (&mut [f64], OutView<'_>) {
        let (n, s, len) = (self.n, blk.start, blk.len);
        if o == 0 {
            let view = OutView {
                values: &[],
                lo: &[],
                hi: &self.jac[..],
                d: 0,
                n,
                blk,
            };
            (&mut self.values[s..s + len], view)
        } else {
            let k = o as usize - 1;
            let (lo, rest) = self.jac.split_at_mut(k * n);
            let (col, hi) = rest.split_at_mut(n);
            let view = OutView {
                values: &self.values[..],
                lo,
                hi,
                d: o,
                n,
                blk,
            };
            (&mut col[s..s + len], view)
        }
    }

    /// Read access to every output.
    fn view(&self, blk: Block) -> OutView<'_> {
        OutView {
            values: &self.values[..],
            lo: &[],
            hi: &self.jac[..],
            d: 0,
            n: self.n,
            blk,
        }
    }
}

/// Read access to the outputs except output `d` (when `d > 0`; with
/// `d == 0` and empty `values` the values are the excluded one).
struct OutView<'a> {
    values: &'a [f64],
    /// Jacobian columns before `d` (or all of them when `d == 0`: `hi`).
    lo: &'a [f64],
    hi: &'a [f64],
    d: u32,
    n: usize,
    blk: Block,
}

impl OutView<'_> {
    #[inline(always)]
    fn out(&self, o: u32) -> &[f64] {
        let (s, len, n) = (self.blk.start, self.blk.len, self.n);
        let col = if o == 0 {
            self.values
        } else if self.d == 0 {
            &self.hi[(o as usize - 1) * n..]
        } else if o < self.d {
            &self.lo[(o as usize - 1) * n..]
        } else {
            &self.hi[(o - self.d - 1) as usize * n..]
        };
        &col[s..s + len]
    }
}

/// Read access to registers (except the destination), outputs and data.
struct Reader<'a> {
    lo: &'a [f64],
    hi: &'a [f64],
    d: usize,
    outs: OutView<'a>,
    x: &'a [&'a [f64]],
}

impl Reader<'_> {
    #[inline(always)]
    fn get(&self, l: Loc) -> &[f64] {
        let len = self.outs.blk.len;
        match l {
            Loc::R(r) => {
                let r = r as usize;
                if r < self.d {
                    &self.lo[r * BLOCK..r * BLOCK + len]
                } else {
                    let o = (r - self.d - 1) * BLOCK;
                    &self.hi[o..o + len]
                }
            }
            Loc::O(o) => self.outs.out(o),
            Loc::X(k) => {
                let s = self.outs.blk.start;
                &self.x[k as usize][s..s + len]
            }
        }
    }
}

/// The destination of an instruction and read access to everything else.
#[inline(always)]
fn split<'a>(
    d: Loc,
    regs: &'a mut [f64],
    outs: &'a mut Outs<'_>,
    x: &'a [&'a [f64]],
    blk: Block,
) -> (&'a mut [f64], Reader<'a>) {
    match d {
        Loc::R(r) => {
            let r = r as usize;
            let (lo, rest) = regs.split_at_mut(r * BLOCK);
            let (dst, hi) = rest.split_at_mut(BLOCK);
            (
                &mut dst[..blk.len],
                Reader {
                    lo,
                    hi,
                    d: r,
                    outs: outs.view(blk),
                    x,
                },
            )
        }
        Loc::O(o) => {
            let (dst, view) = outs.split_out(o, blk);
            (
                dst,
                Reader {
                    lo: regs,
                    hi: &[],
                    d: usize::MAX,
                    outs: view,
                    x,
                },
            )
        }
        Loc::X(_) => unreachable!("data columns are never written"),
    }
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
            Un::Erf => k1($d, $a, ops::erf),
            Un::Erfc => k1($d, $a, ops::erfc),
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
            Bin::MulZ => $kern($d, $a, $b, ops::mul_z),
        }
    };
}

/// Runs one column instruction over one block.
fn exec(inst: &Ins, regs: &mut [f64], outs: &mut Outs<'_>, sc: &[f64], x: &[&[f64]], blk: Block) {
    match *inst {
        Ins::Copy { d, a } => {
            let (dst, r) = split(d, regs, outs, x, blk);
            dst.copy_from_slice(r.get(a));
        }
        Ins::Un { op, d, a } => {
            let (dst, r) = split(d, regs, outs, x, blk);
            un_kernel!(op, dst, r.get(a));
        }
        Ins::CC { op, d, a, b } => {
            let (dst, r) = split(d, regs, outs, x, blk);
            bin_kernel!(op, k2, dst, r.get(a), r.get(b));
        }
        Ins::SC { op, d, s, b } => {
            let (dst, r) = split(d, regs, outs, x, blk);
            bin_kernel!(op, ks_left, dst, sc[s as usize], r.get(b));
        }
        Ins::CS { op, d, a, s } => {
            let (dst, r) = split(d, regs, outs, x, blk);
            let s = sc[s as usize];
            let a = r.get(a);
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
            let (dst, r) = split(d, regs, outs, x, blk);
            let at = |s: Src, i: usize| match s {
                Src::C(l) => r.get(l)[i],
                Src::S(k) => sc[k as usize],
            };
            for (i, o) in dst.iter_mut().enumerate() {
                *o = ops::select(at(p, i), at(q, i), at(t, i), at(f, i));
            }
        }
        Ins::ExpSC { d, s, a } => {
            let (dst, r) = split(d, regs, outs, x, blk);
            let s = sc[s as usize];
            k1(dst, r.get(a), |x| (s * x).exp());
        }
        Ins::FmaSCC { k, d, s, a, b } => {
            let (dst, r) = split(d, regs, outs, x, blk);
            let s = sc[s as usize];
            let (a, b) = (r.get(a), r.get(b));
            match k {
                Comb::Add => k2(dst, a, b, |x, y| s * x + y),
                Comb::ProdMinus => k2(dst, a, b, |x, y| s * x - y),
                Comb::MinusProd => k2(dst, a, b, |x, y| y - s * x),
            }
        }
        Ins::FmaCCC { k, d, a, b, c } => {
            let (dst, r) = split(d, regs, outs, x, blk);
            let (a, b, c) = (r.get(a), r.get(b), r.get(c));
            match k {
                Comb::Add => k3(dst, a, b, c, |x, y, z| x * y + z),
                Comb::ProdMinus => k3(dst, a, b, c, |x, y, z| x * y - z),
                Comb::MinusProd => k3(dst, a, b, c, |x, y, z| z - x * y),
            }
        }
        Ins::NegMulCC { d, a, b } => {
            let (dst, r) = split(d, regs, outs, x, blk);
            k2(dst, r.get(a), r.get(b), |x, y| -(x * y));
        }
        Ins::MulSCC { d, s, a, b } => {
            let (dst, r) = split(d, regs, outs, x, blk);
            let s = sc[s as usize];
            k2(dst, r.get(a), r.get(b), |x, y| s * (x * y));
        }
    }
}
