//! The time-constant grid: resistances by non-negative least squares at each grid point of the
//! surrogate, the best distinct points as starts.

use super::{Cap, Context, N0, Term, log_grid, set_arc_tau};
use crate::dense::dot;
use crate::element::ElementKind;
use crate::nnls::{NnlsWorkspace, chol_solve, solve_normal};
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
    /// A semi-infinite Warburg element in the arc's resistive branch: a second column of the slot.
    warburg: Option<usize>,
    /// For a diffusion element in an arc's resistive branch, that arc's slot.
    host: Option<usize>,
}

#[derive(Debug, Clone, Copy)]
enum Target {
    Arc { r: usize, cap: Cap },
    Diffusion { r: usize, tau: usize },
}

/// A column of the surrogate at one grid point: in the precomputed Gram matrix, or in the pair table
/// of a hosted slot.
#[derive(Debug, Clone, Copy)]
enum Col {
    Gram(usize),
    Pair(usize, usize),
}

/// Coarse grid points refined per start asked for: the neighbourhoods of the best
/// `REFINED_PER_START × count` coarse points are searched at half a decade.
const REFINED_PER_START: usize = 4;

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
                warburg: None,
                host: None,
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
                // A Warburg element in the branch is shunted by the arc's capacitance: its column
                // belongs to the arc's τ (below).
                let warburg = inner.iter().find_map(|it| match it {
                    Term::Warburg(w) => Some(*w),
                    _ => None,
                });
                slots.push(SlotInfo {
                    slot,
                    target: Target::Arc { r: *r, cap: *cap },
                    grid: arc_grid.clone(),
                    before,
                    plain,
                    warburg,
                    host: None,
                });
                let arc_slot = slots.len() - 1;
                for it in inner {
                    if warburg.is_some() && matches!(it, Term::Warburg(w) if Some(*w) == warburg) {
                        continue;
                    }
                    let before = slots.len();
                    push_term(it, &mut fixed_cols, &mut slots);
                    for hosted in &mut slots[before..] {
                        hosted.host = Some(arc_slot);
                    }
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

    // All candidate columns, weighted: fixed columns first, then each slot's fine grid, `width` columns
    // per grid point (the arc, and its shunted Warburg element when it has one).
    //
    // The shunted Warburg column: for an arc (R + W)|Y with (jωτ)ⁿ = R·Y, Z = (R + W)/(1 + RY + WY),
    // whose derivative in W at W = 0 is 1/(1 + (jωτ)ⁿ)². So W/(1 + (jωτ)ⁿ)² is the Warburg element's
    // share of the arc to first order: all of it below the apex, none well above it, where the
    // capacitance shunts the branch (a Warburg column in series would put a 45° tail at high
    // frequencies that the circuit does not have).
    //
    // A diffusion element in an arc's branch is shunted the same way, Z_d/(1 + (jωτ)ⁿ)², which
    // depends on both time constants: its columns are tabulated over pairs (arc τ, diffusion τ) and
    // their products with the other columns computed at each grid point.
    let width: Vec<usize> = slots
        .iter()
        .map(|s| 1 + usize::from(s.warburg.is_some()))
        .collect();
    let mut cols: Vec<Vec<f64>> = fixed_cols.iter().map(|(_, c)| weigh(c)).collect();
    let mut slot_offset = Vec::with_capacity(slots.len());
    let raw: Vec<Vec<Vec<Complex64>>> = slots
        .iter()
        .zip(&fine)
        .map(|(s, f)| f.iter().map(|&tau| column(s.slot, tau, ctx.grid)).collect())
        .collect();
    for ((s, c), &wd) in slots.iter().zip(&raw).zip(&width) {
        slot_offset.push(cols.len());
        if s.host.is_some() {
            continue;
        }
        for c in c {
            cols.push(weigh(c));
            if wd == 2 {
                let shunted: Vec<Complex64> = c
                    .iter()
                    .zip(ctx.omegas)
                    .map(|(&a, &w)| a * a * Complex64::new(1.0, -1.0) / w.sqrt())
                    .collect();
                cols.push(weigh(&shunted));
            }
        }
    }
    // Pair tables of hosted slots: column, its product with the data and with itself, at index
    // (arc grid index) × (slot's fine length) + (slot's grid index).
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
                    let z: Vec<Complex64> = d.iter().zip(arc).map(|(&d, &a)| d * a * a).collect();
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
    let mut solver = Surrogate::new(k);
    // Column of the surrogate matrix behind each coefficient, for one assignment (no allocation per
    // grid point).
    let mut idx = vec![Col::Gram(0); k];
    for (i, v) in idx.iter_mut().enumerate().take(nf) {
        *v = Col::Gram(i);
    }
    let vector = |c: Col| -> &[f64] {
        match c {
            Col::Gram(a) => &cols[a],
            Col::Pair(s, i) => &pairs[s][i].0,
        }
    };

    // Solves one assignment of fine-grid indices to slots; the sum of squares, with the coefficients
    // left in `solver.x`.
    let mut evaluate = |assign: &[usize], solver: &mut Surrogate| -> f64 {
        let mut i = nf;
        for (s, &g) in assign.iter().enumerate() {
            match slots[s].host {
                Some(h) => {
                    idx[i] = Col::Pair(s, assign[h] * fine[s].len() + g);
                    i += 1;
                }
                None => {
                    for j in 0..width[s] {
                        idx[i] = Col::Gram(slot_offset[s] + g * width[s] + j);
                        i += 1;
                    }
                }
            }
        }
        for (i, &a) in idx.iter().enumerate() {
            solver.b[i] = match a {
                Col::Gram(a) => rhs[a],
                Col::Pair(s, p) => pairs[s][p].1,
            };
            for (j, &b) in idx.iter().enumerate().skip(i) {
                let g = match (a, b) {
                    (Col::Gram(a), Col::Gram(b)) => gram[a * m + b],
                    (Col::Pair(s, p), Col::Pair(t, q)) if s == t && p == q => pairs[s][p].2,
                    (a, b) => dot(vector(a), vector(b)),
                };
                solver.g[(i, j)] = g;
                solver.g[(j, i)] = g;
            }
        }
        solver.solve(yy)
    };
    let ordered = |a: &[usize]| {
        !slots
            .iter()
            .enumerate()
            .any(|(s, info)| info.before.is_some_and(|b| a[s] <= a[b]))
    };

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
        let sse = evaluate(&assign, &mut solver);
        results.push((sse, arena.len()));
        arena.extend_from_slice(&assign);
    }
    results.sort_by(|a, b| a.0.total_cmp(&b.0));
    results.truncate(REFINED_PER_START * count.max(1));

    // Refinement: move each slot by one half decade around the best coarse points (each neighbour
    // once).
    let mut refined = results.clone();
    let mut seen: std::collections::HashSet<Vec<usize>> = results
        .iter()
        .map(|&(_, at)| arena[at..at + ns].to_vec())
        .collect();
    let neighbours = 3usize.pow(ns as u32);
    for &(_, at) in &results {
        for code in 0..neighbours {
            let mut rem = code;
            let mut ok = true;
            for (s, f) in fine.iter().enumerate() {
                let step = (rem % 3) as isize - 1;
                rem /= 3;
                let v = arena[at + s] as isize + step;
                if v < 0 || v >= f.len() as isize {
                    ok = false;
                    break;
                }
                assign[s] = v as usize;
            }
            if !ok || !ordered(&assign) || seen.contains(&assign) {
                continue;
            }
            seen.insert(assign.clone());
            let sse = evaluate(&assign, &mut solver);
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
            evaluate(a, &mut solver);
            chosen.push((a.to_vec(), solver.x.clone()));
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
            let mut at = nf;
            for (s, info) in slots.iter().enumerate() {
                let tau = fine[s][a[s]];
                let v = x[at];
                let r = if v > 0.0 { v } else { 1e-3 * scale };
                if let Some(w) = info.warburg {
                    let v = x[at + 1];
                    ctx.put(
                        &mut p,
                        w,
                        if v > 0.0 {
                            v
                        } else {
                            1e-3 * scale * wmin.sqrt()
                        },
                    );
                }
                at += width[s];
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
    /// Scratch for the Cholesky factor of the unconstrained fast path, row-major k × k.
    l: Vec<f64>,
}

impl Surrogate {
    fn new(k: usize) -> Surrogate {
        Surrogate {
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

    /// Solves for the coefficients (left in `x`) and returns the weighted sum of squares ‖Ax − y‖² = yᵀy − 2xᵀb +
    /// xᵀGx (`yy` = yᵀy) with them. Non-finite input gives zero coefficients and the sum of squares
    /// of the data.
    fn solve(&mut self, yy: f64) -> f64 {
        if !self.solve_unconstrained()
            && solve_normal(&self.g, &self.b, &mut self.x, &mut self.workspace, false).is_err()
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
            let mut s = Surrogate::new(2);
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
    /// against a central difference of the exact impedance (common practice).
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
            let column = arc * arc * unit;
            assert!(
                (numeric - column).norm() <= 1e-6 * column.norm().max(1e-12),
                "ω = {w}: {numeric} vs {column}"
            );
        }
    }
}
