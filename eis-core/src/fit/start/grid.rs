//! The time-constant grid: resistances by non-negative least squares at each grid point of the
//! surrogate, the best distinct points as starts.

use super::{Cap, Context, N0, Term, log_grid, set_arc_tau};
use crate::dense::dot;
use crate::element::ElementKind;
use crate::nnls::{NnlsWorkspace, solve_normal};
use nalgebra::DMatrix;
use num_complex::Complex64;

/// Which time-constant slot a grid column belongs to.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Slot {
    ArcC,
    ArcQ(f64),
    Diffusion(&'static ElementKind),
}

/// One column of the surrogate over the grid (given the slot's τ).
fn column(slot: Slot, tau: f64, grid: &crate::eval::Grid) -> Vec<Complex64> {
    let one = Complex64::new(1.0, 0.0);
    match slot {
        Slot::ArcC => grid
            .omega()
            .iter()
            .map(|&w| one / Complex64::new(1.0, w * tau))
            .collect(),
        Slot::ArcQ(n) => grid
            .omega()
            .iter()
            .map(|&w| {
                one / (one
                    + Complex64::from_polar((w * tau).powf(n), n * std::f64::consts::FRAC_PI_2))
            })
            .collect(),
        Slot::Diffusion(kind) => {
            let mut z = vec![Complex64::new(0.0, 0.0); grid.len()];
            let mut dz = vec![Complex64::new(0.0, 0.0); 2 * grid.len()];
            (kind.impedance)(&[1.0, tau], grid, &mut z, &mut dz);
            z
        }
    }
}

/// A free linear coefficient of the surrogate and how it maps back to parameters.
#[derive(Debug, Clone)]
enum Coef {
    Offset(usize),
    Inductance(usize),
    SeriesCapInverse(usize),
    SeriesCpeInverse { q: usize, n: usize },
    Warburg(usize),
}

/// A time-constant slot of the recognised circuit.
#[derive(Debug, Clone)]
struct SlotInfo {
    slot: Slot,
    /// For arcs: resistance parameter and capacitive element; for diffusion: R and tau parameters.
    target: Target,
    /// Grid index range of allowed τ (coarse grid).
    grid: Vec<f64>,
    /// An earlier slot that must have a smaller τ than this one (identical plain arcs).
    before: Option<usize>,
    /// A plain arc (resistor and capacitive element only).
    plain: bool,
}

#[derive(Debug, Clone, Copy)]
enum Target {
    Arc { r: usize, cap: Cap },
    Diffusion { r: usize, tau: usize },
}

/// Starting points for a recognised circuit, best first.
pub(crate) fn grid_starts(ctx: &Context<'_>, terms: &[Term], count: usize) -> Vec<Vec<f64>> {
    let (wmin, wmax) = ctx.omega_range();
    let mut fixed_cols: Vec<(Coef, Vec<Complex64>)> = Vec::new();
    let mut slots: Vec<SlotInfo> = Vec::new();
    let arc_grid = log_grid(0.3 / wmax, 3.0 / wmin, 1.0);
    let diff_grid = log_grid(3.0 / wmax, 30.0 / wmin, 1.0);
    let col = |f: &dyn Fn(f64) -> Complex64| ctx.omegas.iter().map(|&w| f(w)).collect::<Vec<_>>();
    let push_term = |t: &Term,
                     fixed_cols: &mut Vec<(Coef, Vec<Complex64>)>,
                     slots: &mut Vec<SlotInfo>| {
        match *t {
            Term::Offset(r) => {
                fixed_cols.push((Coef::Offset(r), col(&|_| Complex64::new(1.0, 0.0))))
            }
            Term::Inductance(l) => {
                fixed_cols.push((Coef::Inductance(l), col(&|w| Complex64::new(0.0, w))))
            }
            Term::SeriesCap(c) => fixed_cols.push((
                Coef::SeriesCapInverse(c),
                col(&|w| Complex64::new(0.0, -1.0 / w)),
            )),
            Term::SeriesCpe { q, n } => {
                let nv = if ctx.fixed[n] { ctx.base[n] } else { N0 };
                fixed_cols.push((
                    Coef::SeriesCpeInverse { q, n },
                    col(&|w| Complex64::from_polar(w.powf(-nv), -nv * std::f64::consts::FRAC_PI_2)),
                ))
            }
            Term::Warburg(s) => fixed_cols.push((
                Coef::Warburg(s),
                col(&|w| Complex64::new(1.0, -1.0) / w.sqrt()),
            )),
            Term::Diffusion { kind, r, tau } => slots.push(SlotInfo {
                slot: Slot::Diffusion(kind),
                target: Target::Diffusion { r, tau },
                grid: diff_grid.clone(),
                before: None,
                plain: false,
            }),
            Term::Arc { .. } => unreachable!("arcs handled by the caller"),
        }
    };
    for t in terms {
        match t {
            Term::Arc { r, cap, inner } => {
                let slot = match *cap {
                    Cap::C(_) => Slot::ArcC,
                    Cap::Q { n, .. } => Slot::ArcQ(if ctx.fixed[n] { ctx.base[n] } else { N0 }),
                };
                // A plain arc identical in form to an earlier plain arc must come after it in τ.
                let plain = inner.is_empty();
                let before = if plain {
                    slots.iter().rposition(|s| s.plain && s.slot == slot)
                } else {
                    None
                };
                slots.push(SlotInfo {
                    slot,
                    target: Target::Arc { r: *r, cap: *cap },
                    grid: arc_grid.clone(),
                    before,
                    plain,
                });
                for it in inner {
                    push_term(it, &mut fixed_cols, &mut slots);
                }
            }
            other => push_term(other, &mut fixed_cols, &mut slots),
        }
    }

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
    let mut cols: Vec<Vec<f64>> = fixed_cols.iter().map(|(_, c)| weigh(c)).collect();
    let mut slot_offset = Vec::with_capacity(slots.len());
    for (s, f) in slots.iter().zip(&fine) {
        slot_offset.push(cols.len());
        for &tau in f {
            let c = column(s.slot, tau, ctx.grid);
            cols.push(weigh(&c));
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
    let nf = fixed_cols.len();
    let k = nf + slots.len();
    let mut solver = Surrogate::new(k);

    // Evaluate one assignment of fine-grid indices to slots.
    let evaluate = |assign: &[usize], solver: &mut Surrogate| -> (f64, Vec<f64>) {
        let idx = (0..nf).chain(assign.iter().enumerate().map(|(s, &g)| slot_offset[s] + g));
        for (i, a) in idx.enumerate() {
            solver.b[i] = rhs[a];
            let from = (0..nf).chain(assign.iter().enumerate().map(|(s, &g)| slot_offset[s] + g));
            for (j, b) in from.enumerate() {
                solver.g[(i, j)] = gram[a * m + b];
            }
        }
        solver.solve(yy)
    };

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
        let (sse, x) = evaluate(&assign, &mut solver);
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
            let (sse, x) = evaluate(&a, &mut solver);
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

    let scale = ctx.scale();
    chosen
        .into_iter()
        .map(|(a, x)| {
            let mut p = ctx.base.to_vec();
            for (c, (coef, _)) in fixed_cols.iter().enumerate() {
                let v = x[c];
                match *coef {
                    Coef::Offset(r) => ctx.put(&mut p, r, if v > 0.0 { v } else { 1e-3 * scale }),
                    Coef::Inductance(l) => {
                        ctx.put(&mut p, l, if v > 0.0 { v } else { 1e-3 * scale / wmax })
                    }
                    Coef::SeriesCapInverse(ci) => ctx.put(
                        &mut p,
                        ci,
                        if v > 0.0 {
                            1.0 / v
                        } else {
                            1e3 / (wmin * scale)
                        },
                    ),
                    Coef::SeriesCpeInverse { q, n } => {
                        ctx.put(
                            &mut p,
                            q,
                            if v > 0.0 {
                                1.0 / v
                            } else {
                                1e3 / (wmin * scale)
                            },
                        );
                        ctx.put(&mut p, n, N0);
                    }
                    Coef::Warburg(s) => ctx.put(
                        &mut p,
                        s,
                        if v > 0.0 {
                            v
                        } else {
                            1e-3 * scale * wmin.sqrt()
                        },
                    ),
                }
            }
            for (s, info) in slots.iter().enumerate() {
                let tau = fine[s][a[s]];
                let v = x[nf + s];
                let r = if v > 0.0 { v } else { 1e-3 * scale };
                match info.target {
                    Target::Arc { r: ri, cap } => {
                        ctx.put(&mut p, ri, r);
                        set_arc_tau(ctx, &mut p, ri, cap, tau);
                    }
                    Target::Diffusion { r: ri, tau: ti } => {
                        ctx.put(&mut p, ri, r);
                        ctx.put(&mut p, ti, tau);
                    }
                }
            }
            p
        })
        .collect()
}

/// The surrogate's normal equations at one grid point, G x = b with x ≥ 0 (G = AᵀA, b = Aᵀy over the
/// chosen columns), solved by the crate's Lawson–Hanson NNLS; buffers are allocated once and reused for
/// every grid point.
struct Surrogate {
    g: DMatrix<f64>,
    b: Vec<f64>,
    x: Vec<f64>,
    workspace: NnlsWorkspace,
}

impl Surrogate {
    fn new(k: usize) -> Surrogate {
        Surrogate {
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
