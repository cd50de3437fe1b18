//! The time-constant grid: resistances by non-negative least squares at each grid point of the
//! surrogate, the best distinct points as starts.

use super::{
    Context, Slot, Term, linear_seed, log_grid, set_arc_tau, set_feature, set_linear, unit_shape,
};
use crate::dense::dot;
use crate::element::{ARC_WINDOW, ElementKind, Seed};
use crate::nnls::{NnlsWorkspace, chol_solve, solve_normal};
use nalgebra::DMatrix;
use num_complex::Complex64;

/// A time-constant slot of the recognised circuit: an arc or a feature element.
#[derive(Debug, Clone)]
struct SlotInfo {
    target: Slot,
    /// Allowed τ (coarse grid).
    grid: Vec<f64>,
    /// An earlier slot that must have a smaller τ than this one (identical plain arcs or features in
    /// series).
    before: Option<usize>,
    /// For plain arcs (resistor and capacitive element only) and features in series: the (capacitive)
    /// kind and its values at unit resistance and time constant, which identify blocks of one form.
    plain: Option<(&'static ElementKind, Vec<f64>)>,
    /// For an arc: the linear elements of its resistive branch (a semi-infinite Warburg element),
    /// each a further column of the slot, shunted by the arc (see [`shunt`]).
    shunted: Vec<LinearTerm>,
    /// For a feature in an arc's resistive branch: that arc's slot. Its columns, shunted by the arc,
    /// depend on both time constants and are tabulated over pairs (see [`Tables`]).
    host: Option<usize>,
}

/// The first-order share of an element of impedance `z` in an arc's resistive branch, where `arc` is
/// the arc's column at unit resistance, 1/(1 + (jωτ)ⁿ): for (R + Z)|Y with (jωτ)ⁿ = R·Y,
/// ∂/∂Z [(R + Z)/(1 + (R + Z)Y)] at Z = 0 is 1/(1 + RY)² = arc². All of it below the arc's apex,
/// none well above it, where the capacitance shunts the branch: a column in series would give a
/// diffusion element a 45° tail at high frequencies that the circuit does not have, which ranked the
/// grid points of such circuits poorly.
fn shunt(arc: Complex64, z: Complex64) -> Complex64 {
    arc * arc * z
}

impl SlotInfo {
    /// The slot's column over the data's frequencies at time constant `tau`, at unit resistance.
    fn column(&self, ctx: &Context<'_>, tau: f64) -> Vec<Complex64> {
        match self.target {
            Slot::Arc { cap, .. } => {
                let Seed::Capacitive { parallel, .. } = cap.kind.seed else {
                    return vec![Complex64::new(0.0, 0.0); ctx.grid.len()];
                };
                // R = 1 in parallel with the capacitive element: 1/(1 + 1/Z_cap).
                unit_shape(ctx, cap.kind, cap.first, |fixed, v| {
                    parallel(1.0, tau, fixed, v)
                })
                .into_iter()
                .map(|z| 1.0 / (1.0 + 1.0 / z))
                .collect()
            }
            Slot::Feature { kind, first } => match kind.seed {
                Seed::Feature { of, .. } => {
                    unit_shape(ctx, kind, first, |fixed, v| of(1.0, tau, fixed, v))
                }
                _ => vec![Complex64::new(0.0, 0.0); ctx.grid.len()],
            },
        }
    }
}

/// A linear term of the surrogate: kind, first parameter and its column at coefficient 1.
type LinearTerm = (&'static ElementKind, usize, Vec<Complex64>);

/// The surrogate of a recognised circuit: its linear terms and its time-constant slots.
type Surrogate = (Vec<LinearTerm>, Vec<SlotInfo>);

/// Reads the recognised blocks as linear columns and time-constant slots, arcs on the arc window and
/// features on their own.
fn surrogate(ctx: &Context<'_>, terms: &[Term]) -> Surrogate {
    let (wmin, wmax) = ctx.omega_range();
    let window = |(lo, hi): (f64, f64)| log_grid(lo / wmax, hi / wmin, 1.0);
    let mut linear = Vec::new();
    let mut slots: Vec<SlotInfo> = Vec::new();
    let push = |t: &Term, top: bool, linear: &mut Vec<_>, slots: &mut Vec<SlotInfo>| match *t {
        Term::Linear { kind, first } => {
            if let Some(of) = linear_seed(kind) {
                let z = unit_shape(ctx, kind, first, |fixed, v| of(1.0, fixed, v));
                linear.push((kind, first, z));
            }
        }
        Term::Feature { kind, first } => {
            // A feature in series identical in form to an earlier one must come after it in τ.
            let range = first..first + kind.params.len();
            let mut v = ctx.base[range.clone()].to_vec();
            if let Seed::Feature { of, .. } = kind.seed {
                of(1.0, 1.0, &ctx.fixed[range], &mut v);
            }
            let plain = top.then_some((kind, v));
            let before = plain
                .as_ref()
                .and_then(|p| slots.iter().rposition(|s| s.plain.as_ref() == Some(p)));
            slots.push(SlotInfo {
                target: Slot::Feature { kind, first },
                grid: window(kind.seed.window().unwrap_or(ARC_WINDOW)),
                before,
                plain,
                shunted: Vec::new(),
                host: None,
            })
        }
        Term::Arc { .. } => {}
    };
    for t in terms {
        match t {
            Term::Arc { r, cap, inner } => {
                // A plain arc identical in form to an earlier plain arc must come after it in τ.
                let plain = inner.is_empty().then(|| {
                    let mut v = ctx.base[cap.first..cap.first + cap.kind.params.len()].to_vec();
                    if let Seed::Capacitive { parallel, .. } = cap.kind.seed {
                        parallel(1.0, 1.0, &ctx.fixed[cap.first..cap.first + v.len()], &mut v);
                    }
                    (cap.kind, v)
                });
                let before = plain
                    .as_ref()
                    .and_then(|p| slots.iter().rposition(|s| s.plain.as_ref() == Some(p)));
                // Linear elements of the branch become further columns of the arc's slot, features
                // slots hosted by it: both shunted by the arc.
                let arc_slot = slots.len();
                let mut shunted = Vec::new();
                for it in inner {
                    if let Term::Linear { .. } = it {
                        push(it, false, &mut shunted, &mut slots);
                    }
                }
                slots.push(SlotInfo {
                    target: Slot::Arc { r: *r, cap: *cap },
                    grid: window(ARC_WINDOW),
                    before,
                    plain,
                    shunted,
                    host: None,
                });
                for it in inner {
                    if let Term::Feature { .. } = it {
                        push(it, false, &mut linear, &mut slots);
                        if let Some(hosted) = slots.last_mut() {
                            hosted.host = Some(arc_slot);
                        }
                    }
                }
            }
            other => push(other, true, &mut linear, &mut slots),
        }
    }
    (linear, slots)
}

/// Starting points for a recognised circuit, best first.
pub(crate) fn grid_starts(ctx: &Context<'_>, terms: &[Term], count: usize) -> Vec<Vec<f64>> {
    let (fixed_cols, slots) = surrogate(ctx, terms);
    let mut tables = Tables::new(ctx, &fixed_cols, &slots);
    let chosen = search(&mut tables, &slots, count);
    to_params(ctx, &fixed_cols, &slots, &tables.fine, chosen)
}

/// A column of the surrogate at one grid point: in the precomputed Gram matrix, or in the pair table
/// of a hosted slot (slot, index).
#[derive(Debug, Clone, Copy)]
enum Col {
    Gram(usize),
    Pair(usize, usize),
}

/// Coarse grid points refined per start asked for: the neighbourhoods of the best
/// `REFINED_PER_START × count` coarse points are searched at half a decade.
const REFINED_PER_START: usize = 4;

/// The weighted columns of the surrogate over every slot's fine grid, as a Gram matrix computed once,
/// and the pair tables of hosted slots.
struct Tables {
    /// Per slot: the coarse grid plus half-decade midpoints (even indices are the coarse points).
    fine: Vec<Vec<f64>>,
    /// Index of each slot's first column (`width` columns per grid point; unused for hosted slots).
    slot_offset: Vec<usize>,
    /// Columns per grid point of each slot: 1 + its shunted linear elements.
    width: Vec<usize>,
    /// Host slot of each slot, if any.
    host: Vec<Option<usize>>,
    /// All weighted columns of the Gram matrix.
    cols: Vec<Vec<f64>>,
    /// Gram matrix of all columns (m × m) and the columns' products with the data.
    gram: Vec<f64>,
    rhs: Vec<f64>,
    /// Per hosted slot: the weighted column shunted by its host at (host grid index) × (slot's fine
    /// length) + (slot's grid index), with its products with the data and with itself.
    pairs: Vec<Vec<(Vec<f64>, f64, f64)>>,
    /// Per hosted slot: products of each pair column with each Gram column, filled on first use
    /// (NaN until then; the grid search meets the same products many times).
    pair_gram: Vec<Vec<f64>>,
    /// Weighted sum of squares of the data.
    yy: f64,
    m: usize,
    /// Number of linear (fixed-shape) columns, which come first.
    nf: usize,
    /// Surrogate column behind each coefficient for the assignment being evaluated (no allocation per
    /// grid point).
    idx: Vec<Col>,
}

impl Tables {
    fn new(ctx: &Context<'_>, fixed_cols: &[LinearTerm], slots: &[SlotInfo]) -> Tables {
        let n = ctx.omegas.len();
        let weigh = |v: &[Complex64]| -> Vec<f64> {
            let mut out = Vec::with_capacity(2 * n);
            out.extend((0..n).map(|i| ctx.w_re[i] * v[i].re));
            out.extend((0..n).map(|i| ctx.w_im[i] * v[i].im));
            out
        };
        let y = weigh(ctx.data);
        let yy: f64 = y.iter().map(|v| v * v).sum();

        // Fine grids: the coarse grid plus half-decade midpoints, so refinement can use the same columns.
        let fine: Vec<Vec<f64>> = slots
            .iter()
            .map(|s| {
                let g = &s.grid;
                let mut f = Vec::with_capacity(2 * g.len());
                for k in 0..g.len() {
                    f.push(g[k]);
                    if k + 1 < g.len() {
                        f.push((g[k] * g[k + 1]).sqrt());
                    }
                }
                f
            })
            .collect();

        // All candidate columns, weighted: fixed columns first, then each slot's fine grid, `width`
        // columns per grid point (the arc, then its shunted linear elements).
        let width: Vec<usize> = slots.iter().map(|s| 1 + s.shunted.len()).collect();
        let raw: Vec<Vec<Vec<Complex64>>> = slots
            .iter()
            .zip(&fine)
            .map(|(s, f)| f.iter().map(|&tau| s.column(ctx, tau)).collect())
            .collect();
        let mut cols: Vec<Vec<f64>> = fixed_cols.iter().map(|(_, _, c)| weigh(c)).collect();
        let mut slot_offset = Vec::with_capacity(slots.len());
        for (s, c) in slots.iter().zip(&raw) {
            slot_offset.push(cols.len());
            if s.host.is_some() {
                continue;
            }
            for c in c {
                cols.push(weigh(c));
                for (_, _, z) in &s.shunted {
                    let shunted: Vec<Complex64> =
                        c.iter().zip(z).map(|(&a, &z)| shunt(a, z)).collect();
                    cols.push(weigh(&shunted));
                }
            }
        }
        // A feature hosted by an arc: its column shunted by the arc, over pairs of grid points.
        let pairs: Vec<Vec<(Vec<f64>, f64, f64)>> = slots
            .iter()
            .enumerate()
            .map(|(s, info)| {
                let Some(h) = info.host else {
                    return Vec::new();
                };
                let mut table = Vec::with_capacity(raw[h].len() * raw[s].len());
                for arc in &raw[h] {
                    for d in &raw[s] {
                        let z: Vec<Complex64> =
                            d.iter().zip(arc).map(|(&d, &a)| shunt(a, d)).collect();
                        let v = weigh(&z);
                        let (r, q) = (dot(&v, &y), dot(&v, &v));
                        table.push((v, r, q));
                    }
                }
                table
            })
            .collect();
        let m = cols.len();
        let mut gram = vec![0.0; m * m];
        let mut rhs = vec![0.0; m];
        for a in 0..m {
            rhs[a] = dot(&cols[a], &y);
            for b in a..m {
                let g = dot(&cols[a], &cols[b]);
                gram[a * m + b] = g;
                gram[b * m + a] = g;
            }
        }
        let nf = fixed_cols.len();
        let k = nf + width.iter().sum::<usize>();
        let mut idx = vec![Col::Gram(0); k];
        for (i, v) in idx.iter_mut().enumerate().take(nf) {
            *v = Col::Gram(i);
        }
        let pair_gram = pairs.iter().map(|p| vec![f64::NAN; p.len() * m]).collect();
        Tables {
            pair_gram,
            fine,
            slot_offset,
            width,
            host: slots.iter().map(|s| s.host).collect(),
            cols,
            gram,
            rhs,
            pairs,
            yy,
            m,
            nf,
            idx,
        }
    }

    /// Number of coefficients of the surrogate.
    fn coefficients(&self) -> usize {
        self.idx.len()
    }

    /// A weighted column of the surrogate.
    fn vector(&self, c: Col) -> &[f64] {
        match c {
            Col::Gram(a) => &self.cols[a],
            Col::Pair(s, i) => &self.pairs[s][i].0,
        }
    }

    /// The surrogate's least-squares coefficients (left in `solver.x`) and sum of squares for one
    /// assignment of fine-grid indices to slots.
    fn evaluate(&mut self, assign: &[usize], solver: &mut Normal) -> f64 {
        let mut i = self.nf;
        for (s, &g) in assign.iter().enumerate() {
            match self.host[s] {
                Some(h) => {
                    self.idx[i] = Col::Pair(s, assign[h] * self.fine[s].len() + g);
                    i += 1;
                }
                None => {
                    for j in 0..self.width[s] {
                        self.idx[i] = Col::Gram(self.slot_offset[s] + g * self.width[s] + j);
                        i += 1;
                    }
                }
            }
        }
        let m = self.m;
        for (i, &a) in self.idx.iter().enumerate() {
            solver.b[i] = match a {
                Col::Gram(a) => self.rhs[a],
                Col::Pair(s, p) => self.pairs[s][p].1,
            };
            for (j, &b) in self.idx.iter().enumerate().skip(i) {
                let g = match (a, b) {
                    (Col::Gram(a), Col::Gram(b)) => self.gram[a * m + b],
                    (Col::Pair(s, p), Col::Pair(t, q)) if s == t && p == q => self.pairs[s][p].2,
                    (Col::Pair(s, p), Col::Gram(c)) | (Col::Gram(c), Col::Pair(s, p)) => {
                        let cached = self.pair_gram[s][p * m + c];
                        if cached.is_nan() {
                            let v = dot(&self.pairs[s][p].0, &self.cols[c]);
                            self.pair_gram[s][p * m + c] = v;
                            v
                        } else {
                            cached
                        }
                    }
                    (a, b) => dot(self.vector(a), self.vector(b)),
                };
                solver.g[(i, j)] = g;
                solver.g[(j, i)] = g;
            }
        }
        solver.solve(self.yy)
    }
}

/// Searches the grid: every slot on its coarse points (respecting the order of identical blocks), then
/// half-decade moves around the best; returns the best distinct assignments with their coefficients.
fn search(tables: &mut Tables, slots: &[SlotInfo], count: usize) -> Vec<(Vec<usize>, Vec<f64>)> {
    let mut solver = Normal::new(tables.coefficients());
    let ordered = |a: &[usize]| {
        !slots
            .iter()
            .enumerate()
            .any(|(s, info)| info.before.is_some_and(|b| a[s] <= a[b]))
    };
    let fine_len: Vec<usize> = tables.fine.iter().map(Vec::len).collect();

    // Coarse search: every slot on its coarse points (even fine indices), respecting arc order. The
    // assignments live in one flat arena, `ns` indices each.
    let ns = slots.len();
    let coarse_len: Vec<usize> = slots.iter().map(|s| s.grid.len()).collect();
    let total: usize = coarse_len.iter().product::<usize>().max(1);
    let mut arena: Vec<usize> = Vec::with_capacity(total * ns);
    let mut results: Vec<(f64, usize)> = Vec::with_capacity(total);
    let mut assign = vec![0usize; ns];
    for combo in 0..total {
        let mut rem = combo;
        for (s, &len) in coarse_len.iter().enumerate() {
            assign[s] = 2 * (rem % len);
            rem /= len;
        }
        if !ordered(&assign) {
            continue;
        }
        let sse = tables.evaluate(&assign, &mut solver);
        results.push((sse, arena.len()));
        arena.extend_from_slice(&assign);
    }
    results.sort_by(|a, b| a.0.total_cmp(&b.0));
    results.truncate(REFINED_PER_START * count.max(1));

    // Refinement: move each slot by one half decade around the best coarse points (each neighbour
    // once).
    let mut refined = results.clone();
    let mut seen = Seen::new(&fine_len);
    for &(_, at) in &results {
        seen.insert(&arena[at..at + ns]);
    }
    let neighbours = 3usize.pow(ns as u32);
    for &(_, at) in &results {
        for code in 0..neighbours {
            let mut rem = code;
            let mut ok = true;
            for (s, &len) in fine_len.iter().enumerate() {
                let step = (rem % 3) as isize - 1;
                rem /= 3;
                let v = arena[at + s] as isize + step;
                if v < 0 || v >= len as isize {
                    ok = false;
                    break;
                }
                assign[s] = v as usize;
            }
            if !ok || !ordered(&assign) || !seen.insert(&assign) {
                continue;
            }
            let sse = tables.evaluate(&assign, &mut solver);
            refined.push((sse, arena.len()));
            arena.extend_from_slice(&assign);
        }
    }
    refined.sort_by(|a, b| a.0.total_cmp(&b.0));

    // Keep the best distinct points: at least one slot a whole decade (two fine steps) away.
    let mut chosen: Vec<(Vec<usize>, Vec<f64>)> = Vec::new();
    for &(_, at) in &refined {
        if chosen.len() >= count {
            break;
        }
        let a = &arena[at..at + ns];
        let distinct = chosen
            .iter()
            .all(|(c, _)| c.iter().zip(a).any(|(u, v)| u.abs_diff(*v) >= 2));
        if distinct {
            tables.evaluate(a, &mut solver);
            chosen.push((a.to_vec(), solver.x.clone()));
        }
    }

    chosen
}

/// The assignments of fine-grid indices to slots the search has seen, each as its index in the mixed
/// radix of the fine grids' lengths: a bitmap while all assignments fit in [`SEEN_BITS`] bits (every
/// recognised circuit of a few slots), a hash set beyond.
enum Seen {
    Bits {
        radix: Vec<usize>,
        bits: Vec<u64>,
    },
    Set {
        radix: Vec<usize>,
        set: std::collections::HashSet<u128>,
    },
}

/// Largest number of assignments kept as a bitmap (128 KiB).
const SEEN_BITS: u128 = 1 << 20;

impl Seen {
    fn new(fine_len: &[usize]) -> Seen {
        let radix = fine_len.to_vec();
        let total = fine_len
            .iter()
            .try_fold(1u128, |t, &l| t.checked_mul(l as u128));
        match total {
            Some(t) if t <= SEEN_BITS => Seen::Bits {
                radix,
                bits: vec![0; (t as usize).div_ceil(64)],
            },
            _ => Seen::Set {
                radix,
                set: std::collections::HashSet::new(),
            },
        }
    }

    /// Marks `a` as seen; whether it was new. Beyond about 24 slots of the set a rare collision of the
    /// wrapped index only skips one refinement point.
    fn insert(&mut self, a: &[usize]) -> bool {
        let index = |radix: &[usize]| {
            a.iter().zip(radix).fold(0u128, |k, (&v, &r)| {
                k.wrapping_mul(r as u128).wrapping_add(v as u128)
            })
        };
        match self {
            Seen::Bits { radix, bits } => {
                let k = index(radix) as usize;
                let (word, bit) = (k / 64, 1u64 << (k % 64));
                let new = bits[word] & bit == 0;
                bits[word] |= bit;
                new
            }
            Seen::Set { radix, set } => set.insert(index(radix)),
        }
    }
}

/// A coefficient the NNLS left at zero becomes one whose term reaches 1e-3 of the data's scale where
/// it is largest.
fn positive_or_small(v: f64, scale: f64, z: &[Complex64]) -> f64 {
    if v > 0.0 {
        v
    } else {
        1e-3 * scale / z.iter().map(|v| v.norm()).fold(0.0, f64::max).max(1e-300)
    }
}

/// Parameter values of each chosen grid point.
fn to_params(
    ctx: &Context<'_>,
    fixed_cols: &[LinearTerm],
    slots: &[SlotInfo],
    fine: &[Vec<f64>],
    chosen: Vec<(Vec<usize>, Vec<f64>)>,
) -> Vec<Vec<f64>> {
    let nf = fixed_cols.len();
    let scale = ctx.scale();
    chosen
        .into_iter()
        .map(|(a, x)| {
            let mut p = ctx.base.to_vec();
            for (c, (kind, first, z)) in fixed_cols.iter().enumerate() {
                set_linear(ctx, &mut p, kind, *first, positive_or_small(x[c], scale, z));
            }
            let mut at = nf;
            for (s, info) in slots.iter().enumerate() {
                let tau = fine[s][a[s]];
                let v = x[at];
                at += 1;
                let r = if v > 0.0 { v } else { 1e-3 * scale };
                for (kind, first, z) in &info.shunted {
                    set_linear(
                        ctx,
                        &mut p,
                        kind,
                        *first,
                        positive_or_small(x[at], scale, z),
                    );
                    at += 1;
                }
                match info.target {
                    Slot::Arc { r: ri, cap } => {
                        ctx.put(&mut p, ri, r);
                        set_arc_tau(ctx, &mut p, ri, cap, tau);
                    }
                    Slot::Feature { kind, first } => set_feature(ctx, &mut p, kind, first, r, tau),
                }
            }
            p
        })
        .collect()
}

/// The surrogate's normal equations at one grid point, G x = b with x ≥ 0 (G = AᵀA, b = Aᵀy over the
/// chosen columns), solved by the crate's Lawson–Hanson NNLS unless the unconstrained solution is
/// already positive; buffers are allocated once and reused for every grid point.
struct Normal {
    g: DMatrix<f64>,
    b: Vec<f64>,
    x: Vec<f64>,
    workspace: NnlsWorkspace,
    /// Scratch for the Cholesky factor of the unconstrained fast path, row-major k × k.
    l: Vec<f64>,
}

impl Normal {
    fn new(k: usize) -> Normal {
        Normal {
            g: DMatrix::zeros(k, k),
            b: vec![0.0; k],
            x: vec![0.0; k],
            workspace: NnlsWorkspace::new(k),
            l: vec![0.0; k * k],
        }
    }

    /// The unconstrained least-squares solution by Cholesky of G, into `x`, when G is safely
    /// positive definite (pivots above 1e-12 of their diagonal) and every coefficient is positive:
    /// then it is also the non-negative solution (it satisfies the Karush–Kuhn–Tucker conditions with
    /// no active constraint), found without the active-set iterations. False otherwise.
    fn solve_unconstrained(&mut self) -> bool {
        let k = self.b.len();
        let l = &mut self.l;
        for i in 0..k {
            for j in 0..=i {
                let mut v = self.g[(i, j)];
                for t in 0..j {
                    v -= l[i * k + t] * l[j * k + t];
                }
                if i == j {
                    // NaN fails too.
                    if v.partial_cmp(&(1e-12 * self.g[(i, i)])) != Some(std::cmp::Ordering::Greater)
                    {
                        return false;
                    }
                    l[i * k + i] = v.sqrt();
                } else {
                    l[i * k + j] = v / l[j * k + j];
                }
            }
        }
        self.x.copy_from_slice(&self.b);
        chol_solve(l, k, k, &mut self.x);
        self.x.iter().all(|v| *v > 0.0 && v.is_finite())
    }

    /// Solves for the coefficients (left in `x`) and returns the weighted sum of squares
    /// ‖Ax − y‖² = yᵀy − 2xᵀb + xᵀGx (`yy` = yᵀy) with them. Non-finite input gives zero
    /// coefficients and the sum of squares of the data. The active-set route starts from the free set
    /// of the last grid point that needed it: the search visits neighbouring points in turn, whose
    /// free sets are mostly the same.
    fn solve(&mut self, yy: f64) -> f64 {
        if !self.solve_unconstrained()
            && solve_normal(&self.g, &self.b, &mut self.x, &mut self.workspace, true).is_err()
        {
            self.x.fill(0.0);
        }
        let x = &self.x;
        let k = x.len();
        let mut sse = yy;
        for i in 0..k {
            sse -= 2.0 * x[i] * self.b[i];
            for j in 0..k {
                sse += x[i] * self.g[(i, j)] * x[j];
            }
        }
        sse.max(0.0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The fast path (unconstrained Cholesky, taken when every coefficient is positive) and the
    /// active-set route give the same non-negative least-squares solution; the active-set route alone
    /// is taken when the unconstrained solution has a negative entry. Reference: Lawson & Hanson 1974,
    /// Solving Least Squares Problems, ch. 23 (the KKT conditions of NNLS).
    #[test]
    fn fast_path_agrees_with_the_active_set_solution() {
        // A = [[1, 0.5], [0.2, 1], [0.3, 0.1]]; y chosen so that x = (2, 1) fits exactly (positive).
        let a = [[1.0, 0.5], [0.2, 1.0], [0.3, 0.1]];
        for (y, positive) in [([2.5, 1.4, 0.7], true), ([-1.0, 2.0, 0.1], false)] {
            let mut s = Normal::new(2);
            for i in 0..2 {
                s.b[i] = (0..3).map(|r| a[r][i] * y[r]).sum();
                for j in 0..2 {
                    s.g[(i, j)] = (0..3).map(|r| a[r][i] * a[r][j]).sum();
                }
            }
            assert_eq!(s.solve_unconstrained(), positive);
            let yy: f64 = y.iter().map(|v| v * v).sum();
            let sse = s.solve(yy);
            let fast = s.x.clone();
            let mut reference = vec![0.0; 2];
            let mut ws = NnlsWorkspace::new(2);
            solve_normal(&s.g, &s.b, &mut reference, &mut ws, false).unwrap();
            for (f, r) in fast.iter().zip(&reference) {
                assert!(
                    (f - r).abs() <= 1e-12 * (1.0 + r.abs()),
                    "{fast:?} vs {reference:?}"
                );
            }
            let direct: f64 = (0..3)
                .map(|r| (a[r][0] * fast[0] + a[r][1] * fast[1] - y[r]).powi(2))
                .sum();
            assert!(
                (sse - direct).abs() <= 1e-12 * (1.0 + direct),
                "{sse} vs {direct}"
            );
        }
    }

    /// The shunted column of a branch element is the derivative of (R + W)|Y in W at W = 0: checked
    /// against a central difference of the exact impedance (common practice), for a Warburg-shaped
    /// unit element (1 − j)/√ω.
    #[test]
    fn shunted_column_is_the_first_order_share_of_the_branch_element() {
        let (r, q, n): (f64, f64, f64) = (2.0, 1e-3, 0.85);
        let tau = (r * q).powf(1.0 / n);
        for w in [0.1f64, 3.0, 100.0, 1e4] {
            let y = Complex64::from_polar(q * w.powf(n), n * std::f64::consts::FRAC_PI_2);
            let arc = Complex64::new(1.0, 0.0)
                / (Complex64::new(1.0, 0.0)
                    + Complex64::from_polar((w * tau).powf(n), n * std::f64::consts::FRAC_PI_2));
            let z = |x: Complex64| (r + x) / (Complex64::new(1.0, 0.0) + (r + x) * y);
            let unit = Complex64::new(1.0, -1.0) / w.sqrt();
            let h = 1e-6;
            let numeric = (z(unit * h) - z(-unit * h)) / (2.0 * h);
            let column = shunt(arc, unit);
            assert!(
                (numeric - column).norm() <= 1e-6 * column.norm().max(1e-12),
                "ω = {w}: {numeric} vs {column}"
            );
        }
    }
}
