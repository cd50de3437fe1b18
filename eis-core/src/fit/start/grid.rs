//! The time-constant grid: resistances by non-negative least squares at each grid point of the
//! surrogate, the best distinct points as starts.

use super::{
    Context, Slot, Term, linear_seed, log_grid, set_arc_tau, set_feature, set_linear, unit_shape,
};
use crate::dense::dot;
use crate::element::{ARC_WINDOW, ElementKind, Seed};
use crate::nnls::{NnlsWorkspace, solve_normal};
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
    plain: Option<(&'static str, Vec<f64>)>,
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
            let plain = top.then_some((kind.symbol, v));
            let before = plain
                .as_ref()
                .and_then(|p| slots.iter().rposition(|s| s.plain.as_ref() == Some(p)));
            slots.push(SlotInfo {
                target: Slot::Feature { kind, first },
                grid: window(kind.seed.window().unwrap_or(ARC_WINDOW)),
                before,
                plain,
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
                    (cap.kind.symbol, v)
                });
                let before = plain
                    .as_ref()
                    .and_then(|p| slots.iter().rposition(|s| s.plain.as_ref() == Some(p)));
                slots.push(SlotInfo {
                    target: Slot::Arc { r: *r, cap: *cap },
                    grid: window(ARC_WINDOW),
                    before,
                    plain,
                });
                for it in inner {
                    push(it, false, &mut linear, &mut slots);
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
    let tables = Tables::new(ctx, &fixed_cols, &slots);
    let chosen = search(&tables, &slots, count);
    to_params(ctx, &fixed_cols, &slots, &tables.fine, chosen)
}

/// The weighted columns of the surrogate over every slot's fine grid, as a Gram matrix computed once.
struct Tables {
    /// Per slot: the coarse grid plus half-decade midpoints (even indices are the coarse points).
    fine: Vec<Vec<f64>>,
    /// Index of each slot's first column.
    slot_offset: Vec<usize>,
    /// Gram matrix of all columns (m × m) and the columns' products with the data.
    gram: Vec<f64>,
    rhs: Vec<f64>,
    /// Weighted sum of squares of the data.
    yy: f64,
    m: usize,
    /// Number of linear (fixed-shape) columns, which come first.
    nf: usize,
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

        // All candidate columns, weighted: fixed columns first, then each slot's fine grid.
        let mut cols: Vec<Vec<f64>> = fixed_cols.iter().map(|(_, _, c)| weigh(c)).collect();
        let mut slot_offset = Vec::with_capacity(slots.len());
        for (s, f) in slots.iter().zip(&fine) {
            slot_offset.push(cols.len());
            for &tau in f {
                cols.push(weigh(&s.column(ctx, tau)));
            }
        }
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
        Tables {
            fine,
            slot_offset,
            gram,
            rhs,
            yy,
            m,
            nf: fixed_cols.len(),
        }
    }

    /// The surrogate's least-squares coefficients and sum of squares for one assignment of fine-grid
    /// indices to slots.
    fn evaluate(&self, assign: &[usize], solver: &mut Normal) -> (f64, Vec<f64>) {
        let (nf, m) = (self.nf, self.m);
        let columns = || {
            (0..nf).chain(
                assign
                    .iter()
                    .enumerate()
                    .map(|(s, &g)| self.slot_offset[s] + g),
            )
        };
        for (i, a) in columns().enumerate() {
            solver.b[i] = self.rhs[a];
            for (j, b) in columns().enumerate() {
                solver.g[(i, j)] = self.gram[a * m + b];
            }
        }
        solver.solve(self.yy)
    }
}

/// Searches the grid: every slot on its coarse points (respecting the order of identical blocks), then
/// half-decade moves around the best; returns the best distinct assignments with their coefficients.
fn search(tables: &Tables, slots: &[SlotInfo], count: usize) -> Vec<(Vec<usize>, Vec<f64>)> {
    let fine = &tables.fine;
    let mut solver = Normal::new(tables.nf + slots.len());
    // Coarse search: every slot on its coarse points (even fine indices), respecting arc order.
    let coarse_len: Vec<usize> = slots.iter().map(|s| s.grid.len()).collect();
    let mut results: Vec<(f64, Vec<usize>, Vec<f64>)> = Vec::new();
    let mut assign = vec![0usize; slots.len()];
    let total: usize = coarse_len.iter().product::<usize>().max(1);
    for combo in 0..total {
        let mut rem = combo;
        for (s, &len) in coarse_len.iter().enumerate() {
            assign[s] = 2 * (rem % len);
            rem /= len;
        }
        if slots
            .iter()
            .enumerate()
            .any(|(s, info)| info.before.is_some_and(|b| assign[s] <= assign[b]))
        {
            continue;
        }
        let (sse, x) = tables.evaluate(&assign, &mut solver);
        results.push((sse, assign.clone(), x));
    }
    results.sort_by(|a, b| a.0.total_cmp(&b.0));
    results.truncate(4 * count.max(1));

    // Refinement: move each slot by one half decade around the best coarse points.
    let mut refined = results.clone();
    for (_, base_assign, _) in &results {
        let neighbours = 3usize.pow(slots.len() as u32);
        for code in 0..neighbours {
            let mut rem = code;
            let mut a = base_assign.clone();
            let mut ok = true;
            for (s, f) in fine.iter().enumerate() {
                let step = (rem % 3) as isize - 1;
                rem /= 3;
                let v = a[s] as isize + step;
                if v < 0 || v >= f.len() as isize {
                    ok = false;
                    break;
                }
                a[s] = v as usize;
            }
            if !ok
                || slots
                    .iter()
                    .enumerate()
                    .any(|(s, info)| info.before.is_some_and(|b| a[s] <= a[b]))
            {
                continue;
            }
            let (sse, x) = tables.evaluate(&a, &mut solver);
            refined.push((sse, a, x));
        }
    }
    refined.sort_by(|a, b| a.0.total_cmp(&b.0));

    // Keep the best distinct points: at least one slot a whole decade (two fine steps) away.
    let mut chosen: Vec<(Vec<usize>, Vec<f64>)> = Vec::new();
    for (_, a, x) in refined {
        if chosen.len() >= count {
            break;
        }
        let distinct = chosen
            .iter()
            .all(|(c, _)| c.iter().zip(&a).any(|(u, v)| u.abs_diff(*v) >= 2));
        if distinct {
            chosen.push((a, x));
        }
    }

    chosen
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
                // A coefficient the NNLS left at zero becomes one whose term reaches 1e-3 of the data's
                // scale where it is largest.
                let v = if x[c] > 0.0 {
                    x[c]
                } else {
                    1e-3 * scale / z.iter().map(|v| v.norm()).fold(0.0, f64::max).max(1e-300)
                };
                set_linear(ctx, &mut p, kind, *first, v);
            }
            for (s, info) in slots.iter().enumerate() {
                let tau = fine[s][a[s]];
                let v = x[nf + s];
                let r = if v > 0.0 { v } else { 1e-3 * scale };
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
/// chosen columns), solved by the crate's Lawson–Hanson NNLS; buffers are allocated once and reused for
/// every grid point.
struct Normal {
    g: DMatrix<f64>,
    b: Vec<f64>,
    x: Vec<f64>,
    workspace: NnlsWorkspace,
}

impl Normal {
    fn new(k: usize) -> Normal {
        Normal {
            g: DMatrix::zeros(k, k),
            b: vec![0.0; k],
            x: vec![0.0; k],
            workspace: NnlsWorkspace::new(k),
        }
    }

    /// Solves for the coefficients and returns the weighted sum of squares ‖Ax − y‖² = yᵀy − 2xᵀb +
    /// xᵀGx (`yy` = yᵀy) with them. Non-finite input gives zero coefficients and the sum of squares
    /// of the data.
    fn solve(&mut self, yy: f64) -> (f64, Vec<f64>) {
        if solve_normal(&self.g, &self.b, &mut self.x, &mut self.workspace, false).is_err() {
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
        (sse.max(0.0), x.clone())
    }
}
