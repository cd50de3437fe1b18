//! Fits along a chain (the spectra of one cell at one SOC, ordered by cycle): warm starts that cannot
//! trap, and arcs that keep their identity from one spectrum to the next.
//!
//! # Warm starts
//!
//! A warm start (the neighbour's result) is one Levenberg–Marquardt run. It is accepted only when it is
//! at least as good as a cheap screening of fresh candidates says is possible: the best three points of
//! the time-constant grid (resistances by non-negative least squares, see [`super::fit`]) are each run
//! to a loose tolerance, and the warm run must reach their lowest χ² (to 1e-6 relative). It must also
//! have converged with no parameter on a bound. Otherwise the full automatic search runs, and the warm
//! run stays a candidate beside its result. A warm start can thus save the full search, but never keep a
//! basin that a few fresh starts show to be worse.
//!
//! # Identity of arcs
//!
//! Two arcs of a circuit can often exchange their parts (the faster arc takes the slower one's
//! resistance and the other way round, or a diffusion element hangs on the other arc) at nearly the same
//! χ²: on one spectrum the data cannot tell them apart, and the noise decides. Along a chain that shows
//! as spikes in the trends that are not in the cell. So every fit here also tries the swapped variants
//! of its optimum (each pair of arcs exchanging resistance and time constant), and among the optima
//! whose χ² are *comparable* — within [`COMPARABLE`] times the reduced χ² of the best, a difference of
//! two standard deviations on one degree of freedom in a likelihood-ratio test (Press, Teukolsky,
//! Vetterling & Flannery, Numerical Recipes, 3rd ed. 2007, §15.6, from memory) — it takes the one whose
//! arcs lie in the same time-constant order as the neighbour's (the arc identity), the lowest χ² among
//! those. Without a neighbour (the first spectrum of a chain) it takes the order of the circuit text,
//! fastest arc first (common practice: circuits are written from high to low frequency). When no
//! comparable optimum keeps the neighbour's order but one with it exists at a clearly higher χ², the
//! data force the change: the fit keeps the better optimum and says so ([`Identity::ForcedJump`]).

use super::FitWarning;
use super::search::{SCREEN_TOLERANCE, Setup};
use super::start;
use super::{FitError, FitResult, FitSettings, fit, fit_from, prepare};
use crate::circuit::Circuit;
use crate::eval::Plan;
use crate::spectrum::Spectrum;

/// Optima whose χ² differ by at most this many times the reduced χ² of the better one are comparable:
/// the data do not tell them apart.
pub const COMPARABLE: f64 = 4.0;

/// Relative χ² by which a warm run may exceed the best screened fresh candidate and still be accepted
/// (the screening runs stop at a loose tolerance, so they may sit just above their minimum).
const SCREEN_SLACK: f64 = 1e-6;

/// χ² per residual below which a fit meets its data to round-off.
const EXACT: f64 = 1e-20;

/// Number of fresh grid candidates a warm run is screened against.
const SCREENED: usize = 3;

/// What became of a warm start.
#[derive(Debug, Clone, Copy, PartialEq)]
#[non_exhaustive]
pub enum WarmVerdict {
    /// No warm start was given: the automatic search ran.
    Cold,
    /// The warm run was as good as the screening of fresh candidates: taken without the full search.
    Accepted,
    /// The warm run was worse than a fresh candidate (or did not converge, or ended on a bound): the
    /// full search ran.
    Replaced {
        /// χ² of the warm run (infinite when it failed).
        warm_chi_square: f64,
        /// Lowest χ² of the screened fresh candidates (infinite when there were none).
        screened_chi_square: f64,
    },
}

impl std::fmt::Display for WarmVerdict {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            WarmVerdict::Cold => write!(f, "automatic starts"),
            WarmVerdict::Accepted => write!(f, "warm start accepted"),
            WarmVerdict::Replaced {
                warm_chi_square,
                screened_chi_square,
            } => write!(
                f,
                "warm start replaced by the full search (chi-square {warm_chi_square:.4e} against {screened_chi_square:.4e} from fresh starts)"
            ),
        }
    }
}

/// How the arcs of the chosen optimum relate to the neighbour's.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum Identity {
    /// No other optimum with the arcs in another order came within reach (or the circuit has fewer than
    /// two arcs): nothing to choose.
    Unique,
    /// Optima of comparable χ² with the arcs in different orders exist; the one that keeps the
    /// neighbour's order (or the circuit's, for the first of a chain) was taken.
    Kept {
        /// χ² of the chosen optimum over the lowest comparable one (≥ 1).
        chi_square_ratio: f64,
    },
    /// The optimum that keeps the neighbour's order has a clearly higher χ²: the data force the arcs
    /// into another order, and the better optimum was kept.
    ForcedJump {
        /// χ² of the best optimum keeping the neighbour's order over the chosen one's.
        chi_square_ratio: f64,
    },
}

impl std::fmt::Display for Identity {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Identity::Unique => write!(f, "arc identity unique"),
            Identity::Kept { chi_square_ratio } => write!(
                f,
                "arcs kept in the chain's order among optima of comparable chi-square (ratio {chi_square_ratio:.4})"
            ),
            Identity::ForcedJump { chi_square_ratio } => write!(
                f,
                "the arcs change order against the previous spectrum of the chain: keeping the order costs {chi_square_ratio:.2} times the chi-square, so the data force the jump"
            ),
        }
    }
}

/// A fit made along a chain.
#[derive(Debug, Clone, PartialEq)]
pub struct ChainFit {
    /// The chosen fit.
    pub result: FitResult,
    /// What became of the warm start.
    pub warm: WarmVerdict,
    /// How the arcs relate to the neighbour's.
    pub identity: Identity,
}

/// The time-constant order of the arcs of `circuit` at `values`: for each arc in circuit order, its rank
/// among the arcs by time constant (0 the fastest). None when the circuit is not made of the
/// recognised blocks or has fewer than two arcs.
pub fn arc_order(circuit: &Circuit, values: &[f64]) -> Option<Vec<usize>> {
    let terms = start::recognise(circuit)?;
    let arcs = start::arcs(&terms);
    if arcs.len() < 2 || values.len() != circuit.params.len() {
        return None;
    }
    let taus: Vec<f64> = arcs
        .iter()
        .map(|&(r, cap)| start::arc_tau(values, r, cap))
        .collect();
    Some(
        taus.iter()
            .map(|t| taus.iter().filter(|u| u.total_cmp(t).is_lt()).count())
            .collect(),
    )
}

/// Lowest χ² of a few fresh candidates (the best grid points, each run to a loose tolerance); None when
/// the circuit is outside the recognised blocks or the data cannot be prepared.
fn screen(circuit: &Circuit, spectrum: &Spectrum, settings: &FitSettings) -> Option<f64> {
    let terms = start::recognise(circuit)?;
    let prep = prepare(spectrum, settings.weighting).ok()?;
    let plan = Plan::compile(circuit);
    let setup = Setup::new(circuit);
    let ctx = setup.context(circuit, &prep);
    let local = setup.local(&plan, &prep);
    start::grid_starts(&ctx, &terms, SCREENED)
        .iter()
        .map(|s| {
            local
                .run(
                    s,
                    settings.tolerance.max(SCREEN_TOLERANCE),
                    settings.patience,
                )
                .chi_square
        })
        .filter(|c| c.is_finite())
        .min_by(f64::total_cmp)
}

/// The optima reached from `values` with each pair of arcs exchanged (one local run each).
fn swapped(
    circuit: &Circuit,
    spectrum: &Spectrum,
    settings: &FitSettings,
    values: &[f64],
) -> Vec<FitResult> {
    let Some(terms) = start::recognise(circuit) else {
        return Vec::new();
    };
    if start::arcs(&terms).len() < 2 {
        return Vec::new();
    }
    let Ok(prep) = prepare(spectrum, settings.weighting) else {
        return Vec::new();
    };
    let setup = Setup::new(circuit);
    let ctx = setup.context(circuit, &prep);
    start::arc_swaps(&ctx, &terms, values)
        .iter()
        .filter_map(|s| fit_from(circuit, spectrum, settings, s).ok())
        .filter(|r| r.converged)
        .collect()
}

/// Values more than this factor away from a parameter's default are not carried into a warm start.
const FAR: f64 = 1e12;

/// A warm start made safe to run from: a positive parameter that the previous fit drove towards zero
/// or infinity (an inductance of 1e-261 H when the data show none) starts again from the circuit's
/// default value. From such a point the internal coordinate sits hundreds of units out, its column of
/// the Jacobian vanishes, and the run stops on its step test where it began.
pub(crate) fn tame(circuit: &Circuit, warm: &[f64]) -> Vec<f64> {
    let base = circuit.default_values();
    warm.iter()
        .zip(&base)
        .map(|(&v, &d)| {
            let far = d > 0.0 && v > 0.0 && (v / d > FAR || d / v > FAR);
            if far || !v.is_finite() { d } else { v }
        })
        .collect()
}

/// One local run from `start` to a loose tolerance, without statistics: the values reached, and
/// whether the run converged with no parameter on a bound. For seeding a joint fit, which refines
/// them. None when the data cannot be prepared or the run gives no finite χ².
pub(crate) fn seed_run(
    circuit: &Circuit,
    spectrum: &Spectrum,
    settings: &FitSettings,
    start: &[f64],
) -> Option<(Vec<f64>, bool)> {
    if start.len() != circuit.params.len() {
        return None;
    }
    let prep = prepare(spectrum, settings.weighting).ok()?;
    let plan = Plan::compile(circuit);
    let setup = Setup::new(circuit);
    let (base, free, transforms) = (&setup.base, &setup.free, &setup.transforms);
    let mut s = base.clone();
    for &i in free {
        let (lo, hi) = circuit.bounds(i);
        let v = start[i];
        s[i] = if v.is_finite() && v > lo && v < hi {
            v
        } else {
            base[i]
        };
    }
    let run = setup.local(&plan, &prep).run(
        &s,
        settings.tolerance.max(SCREEN_TOLERANCE),
        settings.patience,
    );
    if !run.chi_square.is_finite() {
        return None;
    }
    let inside = free
        .iter()
        .zip(transforms)
        .all(|(&i, t)| !t.at_bound(t.to_internal(run.params[i])));
    let good = run.termination.was_successful() && inside;
    Some((run.params, good))
}

fn acceptable(r: &FitResult) -> bool {
    r.converged && !r.at_bound.iter().any(|b| *b)
}

/// Fits one spectrum of a chain: from the warm start `warm` when given (accepted only if a screening of
/// fresh candidates finds nothing better, else the full automatic search runs), then the swapped
/// variants of the optimum, and the choice among comparable optima of the one whose arcs keep the order
/// of `neighbour` (the previous spectrum's fitted values; the circuit's order when None). See the
/// [module documentation](self).
///
/// # Errors
///
/// As [`fit`].
pub fn fit_in_chain(
    circuit: &Circuit,
    spectrum: &Spectrum,
    settings: &FitSettings,
    warm: Option<&[f64]>,
    neighbour: Option<&[f64]>,
) -> Result<ChainFit, FitError> {
    let cold = settings.with_warm_reference(None);
    let mut candidates: Vec<FitResult> = Vec::new();
    let verdict = match warm {
        None => {
            candidates.push(fit(circuit, spectrum, &cold, None)?);
            WarmVerdict::Cold
        }
        Some(w) => {
            if w.len() != circuit.params.len() {
                return Err(FitError::WarmStartLength {
                    got: w.len(),
                    want: circuit.params.len(),
                });
            }
            let run = match fit_from(circuit, spectrum, &cold, &tame(circuit, w)) {
                Ok(r) => Some(r),
                // A warm start of the wrong length is the caller's error; other failures of the
                // single run only mean the full search runs.
                Err(e @ FitError::WarmStartLength { .. }) => return Err(e),
                Err(_) => None,
            };
            let warm_chi = run
                .as_ref()
                .filter(|r| acceptable(r))
                .map_or(f64::INFINITY, |r| r.chi_square);
            let screened = screen(circuit, spectrum, &cold);
            // Data met to round-off (χ² below 1e-20 per residual, weighted residuals being relative)
            // leave nothing to compare.
            let exact = run.as_ref().map_or(0.0, |r| EXACT * (2 * r.points) as f64);
            let bar = screened
                .map_or(f64::INFINITY, |s| s * (1.0 + SCREEN_SLACK))
                .max(exact);
            if warm_chi.is_finite() && warm_chi <= bar {
                candidates.extend(run);
                WarmVerdict::Accepted
            } else {
                candidates.push(fit(circuit, spectrum, &cold, None)?);
                candidates.extend(run.filter(|r| r.converged));
                WarmVerdict::Replaced {
                    warm_chi_square: warm_chi,
                    screened_chi_square: screened.unwrap_or(f64::INFINITY),
                }
            }
        }
    };
    // The swapped variants of the best optimum so far.
    let best = candidates
        .iter()
        .min_by(|a, b| a.chi_square.total_cmp(&b.chi_square))
        .map(|r| r.values.clone());
    if let Some(b) = best {
        let more = swapped(circuit, spectrum, &cold, &b);
        candidates.extend(more);
    }
    let (result, identity) = choose(circuit, candidates, neighbour);
    let mut result = result;
    if let Identity::ForcedJump { chi_square_ratio } = identity {
        result
            .warnings
            .push(FitWarning::ArcOrderJump { chi_square_ratio });
    }
    // What every candidate cost.
    Ok(ChainFit {
        result,
        warm: verdict,
        identity,
    })
}

/// Chooses among candidate optima of one spectrum (see the module documentation).
fn choose(
    circuit: &Circuit,
    mut candidates: Vec<FitResult>,
    neighbour: Option<&[f64]>,
) -> (FitResult, Identity) {
    candidates.sort_by(|a, b| a.chi_square.total_cmp(&b.chi_square));
    let evaluations: usize = candidates.iter().map(|c| c.evaluations).sum();
    let tried: usize = candidates.iter().map(|c| c.starts_tried).sum();
    let finish = |mut r: FitResult, identity| {
        r.evaluations = evaluations;
        r.starts_tried = tried;
        (r, identity)
    };
    let best = &candidates[0];
    let Some(best_order) = arc_order(circuit, &best.values) else {
        let r = candidates.swap_remove(0);
        return finish(r, Identity::Unique);
    };
    let wanted = match neighbour.and_then(|n| arc_order(circuit, n)) {
        Some(o) => o,
        None => (0..best_order.len()).collect(),
    };
    // Data met to round-off make every optimum that meets them comparable.
    let limit = (best.chi_square + COMPARABLE * best.reduced_chi_square)
        .max(EXACT * (2 * best.points) as f64);
    let orders: Vec<Option<Vec<usize>>> = candidates
        .iter()
        .map(|c| arc_order(circuit, &c.values))
        .collect();
    let distinct = orders.iter().any(|o| o.as_ref() != Some(&best_order));
    // Candidates are sorted by χ²: the first keeping the wanted order is the best of them.
    let keeping = orders.iter().position(|o| o.as_ref() == Some(&wanted));
    let best_chi = best.chi_square;
    match keeping {
        Some(k) if candidates[k].chi_square <= limit => {
            let ratio = candidates[k].chi_square / best_chi;
            let r = candidates.swap_remove(k);
            let identity = if distinct {
                Identity::Kept {
                    chi_square_ratio: ratio,
                }
            } else {
                Identity::Unique
            };
            finish(r, identity)
        }
        Some(k) if neighbour.is_some() => {
            let ratio = candidates[k].chi_square / best_chi;
            let r = candidates.swap_remove(0);
            finish(
                r,
                Identity::ForcedJump {
                    chi_square_ratio: ratio,
                },
            )
        }
        _ => {
            let r = candidates.swap_remove(0);
            finish(r, Identity::Unique)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::circuit::parse;

    #[test]
    fn arc_order_ranks_time_constants() {
        let c = parse("R0 + Ra|Ca + Rb|Cb").unwrap();
        assert_eq!(
            arc_order(&c, &[1.0, 1.0, 1e-3, 1.0, 1e-1]),
            Some(vec![0, 1])
        );
        assert_eq!(
            arc_order(&c, &[1.0, 1.0, 1e-1, 1.0, 1e-3]),
            Some(vec![1, 0])
        );
        assert_eq!(
            arc_order(&parse("R0 + Ra|Ca").unwrap(), &[1.0, 1.0, 1.0]),
            None
        );
    }
}
