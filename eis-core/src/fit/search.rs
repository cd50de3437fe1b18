//! The local runs of a fit and the automatic search that ranks them: brief runs from the starts of
//! [`super::start`], runs carried on to convergence, arc moves, the settling rule and the
//! polish of the winner (the method is described under [`fit_seeded`](super::fit_seeded)).

use super::lm::{Solver, Termination};
use super::problem::{self, Point, Problem, Transform};
use super::{DRT_STARTS, FitError, FitResult, FitSettings, Prepared, prepare, start, stats};
use crate::circuit::Circuit;
use crate::eval::Plan;
use crate::spectrum::Spectrum;

/// Tolerance of the final polish of the winner, so that noise-free data are met to round-off.
const POLISH_TOLERANCE: f64 = 1e-15;

/// Tolerance of the runs of the full search, which only rank basins before the winner is polished.
/// Measured on the held-out benchmark (three seeds): 1e-4 instead of 1e-6 saves 8 % of the model
/// evaluations and reaches the same optima; runs that end in one basin then agree in χ² to about
/// [`start::AGREE`].
pub(super) const SCREEN_TOLERANCE: f64 = 1e-4;

/// Budget of the brief run from every grid start, in units of P + 1 evaluations. Runs that reach the
/// global optimum mostly converge within it (about 2(P + 1) evaluations on the held-out benchmark of
/// `bench/heldout.py`), while runs bound for other basins wander for several times as long; their χ²
/// after it ranks the starts far better than the surrogate's.
const BRIEF_PATIENCE: usize = 2;

/// How far above the best χ² so far a brief run from a grid start may still be after P + 1
/// evaluations before it is given up. Not for the arc moves, which start far from any optimum by design
/// and still reach the best one (on the held-out benchmark, one spectrum's optimum was reached only
/// from a move whose χ² was far above the best at that point).
const GIVE_UP: f64 = 10.0;

/// Brief runs carried on to convergence, lowest χ² first.
const CARRIED_ON: usize = 3;

/// Budget of the brief run from every arc move, in units of P + 1 evaluations.
const MOVE_PATIENCE: usize = 2;

/// Runs that reached the best χ² from different starts, from which on the arc moves are skipped. Two
/// or three agreeing runs were not enough: on the held-out benchmark three or four grid starts
/// sometimes agreed on a basin 1.6 to 4 times above the optimum that only an arc move left.
const AGREEING: usize = 5;

/// Relative χ² improvement over a warm-started run below which the second try is taken to confirm it.
const CONFIRM: f64 = 1e-6;

/// How far above the reference reduced χ² a confirmed warm run may lie and still be taken without the
/// full search. Measured on the demo campaign: warm runs confirmed by the second try were the global
/// optimum up to 2× the chain's median, and runs 3× to 10× above it were local minima.
const CONFIRM_RATIO: f64 = 2.5;

/// Von Neumann ratio below which residuals do not look like noise. The ratio of the mean squared
/// successive difference to the mean square, η = Σ(r_{k+1} − r_k)² / Σ r_k² over the real and the
/// imaginary residuals in frequency order, is about 2 for independent noise (its standard deviation
/// about 2/√m for m residuals) and far below 1 where a model misses a feature, whose residuals are
/// smooth in frequency (von Neumann, 1941, Annals of Mathematical Statistics 12, 367).
const NOISE_LIKE: f64 = 1.5;

/// The von Neumann ratio of interleaved residuals (`r[2i]` real, `r[2i + 1]` imaginary part of point
/// `i`), taken along `order` for each part; 0 for fewer than two points or zero residuals.
fn von_neumann_ratio(r: &[f64], order: &[usize]) -> f64 {
    let (mut diff, mut sum) = (0.0, 0.0);
    for part in 0..2 {
        let mut prev: Option<f64> = None;
        for &i in order {
            let v = r[2 * i + part];
            sum += v * v;
            if let Some(p) = prev {
                diff += (v - p) * (v - p);
            }
            prev = Some(v);
        }
    }
    if sum > 0.0 && diff.is_finite() {
        diff / sum
    } else {
        0.0
    }
}

/// One Levenberg–Marquardt run from `start`.
pub(super) struct Run {
    pub(super) params: Vec<f64>,
    pub(super) chi_square: f64,
    pub(super) iterations: usize,
    pub(super) evaluations: usize,
    pub(super) termination: Termination,
    /// The problem's state at `params` when the run ended there (not after `params` were reordered).
    pub(super) point: Option<problem::Evaluated>,
    /// Whether its residuals look like noise ([`NOISE_LIKE`]).
    pub(super) white: bool,
    /// Whether the data determine every free parameter (a basin in which an element shrank out of
    /// the model can fit almost as well as the optimum, with noise-like residuals); judged only for a
    /// white run that becomes the best of a search (see [`Run::noise_like`]), None before.
    pub(super) determined: Option<bool>,
}

impl Run {
    /// Whether its residuals look like noise and the data determine every free parameter, as far as
    /// judged: false until [`start::Search::consider`] has judged a white run.
    pub(super) fn noise_like(&self) -> bool {
        self.white && self.determined == Some(true)
    }
}

/// What the local runs of one fit share: the compiled circuit, the prepared data, the free
/// parameters and their internal transforms.
pub(super) struct Local<'a> {
    plan: &'a Plan,
    prep: &'a Prepared,
    free: &'a [usize],
    transforms: &'a [Transform],
}

impl Local<'_> {
    /// A run from `start` to `tolerance` (on the reduction, the step and the cosine) within
    /// `patience`·(P + 1) evaluations.
    pub(super) fn run(&self, start: &[f64], tolerance: f64, patience: usize) -> Run {
        self.run_with(
            start,
            Solver::default()
                .with_tolerance(tolerance)
                .with_patience(patience),
        )
    }

    /// A Levenberg–Marquardt run from `start` with `solver`.
    pub(super) fn run_with(&self, start: &[f64], solver: Solver) -> Run {
        let Local {
            plan,
            prep,
            free,
            transforms,
        } = *self;
        let mut problem = Problem::new(
            plan,
            &prep.grid,
            &prep.data,
            &prep.w_rows,
            Point::Params(start.to_vec()),
            free,
            transforms,
        );
        let report = solver.minimize(&mut problem);
        let chi = if problem.is_finite() {
            problem.chi_square()
        } else {
            f64::INFINITY
        };
        Run {
            white: von_neumann_ratio(problem.residuals(), &prep.by_frequency) >= NOISE_LIKE,
            determined: None,
            chi_square: chi,
            iterations: problem.jacobian_calls.get().max(1),
            evaluations: report.evaluations,
            params: problem.params.clone(),
            termination: report.termination,
            point: Some(problem.into_evaluated()),
        }
    }
}

/// What a fit's runs and start search need of the circuit besides the prepared data: its defaults,
/// fixed flags, free parameters and their internal transforms.
pub(super) struct Setup {
    /// The circuit's initial or default values.
    pub(super) base: Vec<f64>,
    /// Which parameters are held fixed.
    pub(super) fixed: Vec<bool>,
    /// Indices of the free parameters.
    pub(super) free: Vec<usize>,
    /// Internal transform of each free parameter.
    pub(super) transforms: Vec<Transform>,
}

impl Setup {
    /// The defaults, fixed flags, free parameters and their transforms of `circuit`.
    pub(super) fn new(circuit: &Circuit) -> Setup {
        let fixed: Vec<bool> = circuit.params.iter().map(|p| p.fixed).collect();
        let free: Vec<usize> = (0..fixed.len()).filter(|&i| !fixed[i]).collect();
        Setup {
            base: circuit.default_values(),
            transforms: start::transforms(circuit, &free),
            fixed,
            free,
        }
    }

    /// What the local runs on the data `prep` share, with the compiled circuit `plan`.
    pub(super) fn local<'a>(&'a self, plan: &'a Plan, prep: &'a Prepared) -> Local<'a> {
        Local {
            plan,
            prep,
            free: &self.free,
            transforms: &self.transforms,
        }
    }

    /// The start search's view of `circuit` on the data `prep`.
    pub(super) fn context<'a>(
        &'a self,
        circuit: &'a Circuit,
        prep: &'a Prepared,
    ) -> start::Context<'a> {
        start::Context {
            circuit,
            omegas: &prep.omegas,
            grid: &prep.grid,
            data: &prep.data,
            w_re: &prep.w_re,
            w_im: &prep.w_im,
            base: &self.base,
            fixed: &self.fixed,
        }
    }
}

/// [`fit`](super::fit), or with `single` the warm-start run alone ([`fit_from`](super::fit_from)).
pub(super) fn fit_impl(
    circuit: &Circuit,
    spectrum: &Spectrum,
    settings: &FitSettings,
    warm: Option<&[f64]>,
    seed: Option<&crate::drt::DrtResult>,
    single: bool,
) -> Result<FitResult, FitError> {
    let prep = prepare(spectrum, settings.weighting)?;
    let plan = Plan::compile(circuit);
    let setup = Setup::new(circuit);
    check(circuit, &prep, &setup)?;
    let fitting = Fitting {
        circuit,
        settings,
        prep: &prep,
        plan: &plan,
        setup: &setup,
        ctx: setup.context(circuit, &prep),
        local: setup.local(&plan, &prep),
    };
    // Whether the data determine every parameter at a run's end: judged only for the white runs that
    // become the best of the search, as only the best run's verdict is read.
    let determined = |r: &Run| {
        r.point.as_ref().is_some_and(|p| {
            p.determines_every_parameter(&setup.free, &prep.w_rows, &setup.transforms)
        })
    };
    let mut search = start::Search::new(&determined);
    if let Some(w) = warm {
        if let Some(result) = fitting.warm_start(&mut search, w, single)? {
            return Ok(result);
        }
    }
    fitting.search(&mut search, seed)
}

/// The fits that cannot be tried at all: nothing free, fewer residuals than free parameters, or a
/// circuit value outside its bounds.
fn check(circuit: &Circuit, prep: &Prepared, setup: &Setup) -> Result<(), FitError> {
    let free = setup.free.len();
    if free == 0 {
        return Err(FitError::NothingFree);
    }
    let n = prep.omegas.len();
    if 2 * n <= free {
        return Err(FitError::TooFewPoints {
            points: n,
            residuals: 2 * n,
            free,
        });
    }
    for (i, &v) in setup.base.iter().enumerate() {
        let (lo, hi) = circuit.bounds(i);
        if !(v >= lo && v <= hi) {
            return Err(FitError::StartOutsideBounds {
                name: circuit.params[i].name.clone(),
                value: v,
                lower: lo,
                upper: hi,
            });
        }
    }
    Ok(())
}

/// One fit's circuit, settings and data with what its runs share; its methods are the stages of the
/// search: the warm start and its confirmation, the staged grid starts, the DRT starts, the arc moves
/// and the polish.
struct Fitting<'a> {
    circuit: &'a Circuit,
    settings: &'a FitSettings,
    prep: &'a Prepared,
    plan: &'a Plan,
    setup: &'a Setup,
    ctx: start::Context<'a>,
    local: Local<'a>,
}

impl Fitting<'_> {
    /// A run to the settings' tolerance.
    fn lm(&self, s: &[f64]) -> Run {
        self.local
            .run(s, self.settings.tolerance, self.settings.patience)
    }

    /// A run of the full search. Those runs only have to rank basins: they stop at a looser
    /// tolerance, and the winner is polished tightly at the end.
    fn screen(&self, s: &[f64]) -> Run {
        self.local.run(
            s,
            self.settings.tolerance.max(SCREEN_TOLERANCE),
            self.settings.patience,
        )
    }

    /// A brief run: at most `patience` × (P + 1) evaluations, and given up after P + 1 of them while
    /// its χ² is still above `limit`.
    fn brief(&self, s: &[f64], patience: usize, limit: f64) -> Run {
        let mut solver = Solver::default()
            .with_tolerance(self.settings.tolerance.max(SCREEN_TOLERANCE))
            .with_patience(patience);
        if limit.is_finite() {
            solver = solver.with_give_up(limit, self.setup.free.len() + 1);
        }
        self.local.run_with(s, solver)
    }

    /// The result of `run`, after `evaluations` over `tried` starts.
    fn conclude(&self, run: &Run, evaluations: usize, tried: usize) -> FitResult {
        // The run's last evaluation is reused when it is at the reported parameters.
        let at = match run.point.as_ref().filter(|e| e.params() == run.params) {
            Some(e) => Point::Evaluated(e.clone()),
            None => Point::Params(run.params.clone()),
        };
        let (prep, free, transforms) = (self.prep, &self.setup.free, &self.setup.transforms);
        let problem = Problem::new(
            self.plan,
            &prep.grid,
            &prep.data,
            &prep.w_rows,
            at,
            free,
            transforms,
        );
        stats::summarise(stats::Summary {
            circuit: self.circuit,
            problem: &problem,
            prep_data: &prep.data,
            free,
            transforms,
            run_iterations: run.iterations,
            evaluations,
            tried,
            termination: &run.termination,
            weighting: self.settings.weighting,
        })
    }

    /// A warm-started result is taken as it is unless it sits on a bound, its residuals trend, or
    /// its reduced χ² is well above that of the fit it came from.
    fn acceptable(&self, r: &FitResult) -> bool {
        self.settings
            .warm_reference
            .is_none_or(|reference| r.reduced_chi_square <= 1.5 * reference)
            && !r.systematic_residuals
            && !r.at_bound.iter().any(|b| *b)
    }

    /// The run from the warm start `w`, and the result when it (or the cheap second try) is taken
    /// without the full search; with `single`, the run's result whatever it is.
    fn warm_start(
        &self,
        search: &mut start::Search,
        w: &[f64],
        single: bool,
    ) -> Result<Option<FitResult>, FitError> {
        let (circuit, base) = (self.circuit, &self.setup.base);
        let np = circuit.params.len();
        if w.len() != np {
            return Err(FitError::WarmStartLength {
                got: w.len(),
                want: np,
            });
        }
        let mut s = base.clone();
        for &i in &self.setup.free {
            s[i] = w[i];
            let (lo, hi) = circuit.bounds(i);
            if !(s[i] > lo && s[i] < hi && s[i].is_finite()) {
                s[i] = base[i];
            }
        }
        search.consider(self.lm(&s));
        if let Some(b) = search
            .best
            .as_ref()
            .filter(|b| single || b.termination.was_successful())
        {
            let result = self.conclude(b, search.evaluations, search.tried);
            if single || self.acceptable(&result) {
                return Ok(Some(result));
            }
        }
        // Before the full search, a cheap second try: the three best grid points. A series that
        // stepped into another basin is usually caught here at a fraction of the full cost. When none
        // of them beats the warm run and its reduced χ² is within CONFIRM_RATIO of the reference, they
        // confirm it: that χ² is what this spectrum gives (a noisier spectrum), not the mark of a wrong
        // basin. Further above the reference only the full search is trusted.
        if let Some(t) = start::recognise(circuit) {
            let warm_chi = search.chi_square();
            let warm_ok = search
                .best
                .as_ref()
                .is_some_and(|b| b.termination.was_successful());
            for s in start::grid_starts(&self.ctx, &t, 3) {
                search.consider(self.lm(&s));
            }
            let Some(mut b) = search.best.take() else {
                return Err(FitError::NoFiniteStart);
            };
            start::order_identical_arcs(&self.ctx, &t, &mut b.params);
            let confirmed = warm_ok && b.chi_square >= warm_chi * (1.0 - CONFIRM);
            if b.termination.was_successful() {
                let result = self.conclude(&b, search.evaluations, search.tried);
                let near = self
                    .settings
                    .warm_reference
                    .is_none_or(|reference| result.reduced_chi_square <= CONFIRM_RATIO * reference);
                if (confirmed && near) || self.acceptable(&result) {
                    return Ok(Some(result));
                }
            }
            search.best = Some(b);
        }
        Ok(None)
    }

    /// The full search: the circuit's own start, the grid's starts (or a spread of starts for a
    /// circuit of unrecognised blocks), the DRT starts, the arc moves, and the polish of the winner.
    fn search(
        &self,
        search: &mut start::Search,
        seed: Option<&crate::drt::DrtResult>,
    ) -> Result<FitResult, FitError> {
        let (circuit, settings) = (self.circuit, self.settings);
        if circuit
            .params
            .iter()
            .all(|p| p.fixed || p.initial.is_some())
        {
            search.consider(self.lm(&self.setup.base));
        }
        let terms = start::recognise(circuit);
        match &terms {
            Some(t) => {
                let starts = start::grid_starts(&self.ctx, t, settings.starts);
                self.staged(search, &starts, BRIEF_PATIENCE, GIVE_UP);
                if settings.drt_starts {
                    if let Some(d) = seed {
                        let template = starts
                            .first()
                            .cloned()
                            .unwrap_or_else(|| self.setup.base.clone());
                        for s in &start::drt_starts(&self.ctx, t, d, &template, DRT_STARTS) {
                            search.consider(self.screen(s));
                        }
                    }
                }
                if settings.arc_moves {
                    self.arc_moves(search, t);
                }
            }
            None => {
                for s in &start::spread_starts(&self.ctx, 2 * settings.starts) {
                    search.consider(self.screen(s));
                }
            }
        }
        let Some(mut b) = search.best.take() else {
            return Err(FitError::NoFiniteStart);
        };
        if let Some(t) = &terms {
            start::order_identical_arcs(&self.ctx, t, &mut b.params);
        }
        // Polish the winner with tight tolerances so that noise-free data are met to round-off.
        let polish = self
            .local
            .run(&b.params, POLISH_TOLERANCE, settings.patience);
        search.evaluations += polish.evaluations;
        if polish.chi_square <= b.chi_square {
            let iterations = b.iterations + polish.iterations;
            b = Run {
                iterations,
                ..polish
            };
        }
        Ok(self.conclude(&b, search.evaluations, search.tried))
    }

    /// Every start briefly; a run that converges within its brief budget is done, one still above
    /// `give_up` times the best χ² after P + 1 evaluations is abandoned, and the others are carried
    /// on ([`Fitting::carry_on`]). Starts are taken best first, and the rest are skipped once the
    /// search has settled (`Search::settled`).
    fn staged(
        &self,
        search: &mut start::Search,
        starts: &[Vec<f64>],
        patience: usize,
        give_up: f64,
    ) {
        let mut pending = Vec::new();
        for s in starts {
            if search.settled(pending.len()) {
                break;
            }
            // When only unfinished runs keep the search from settling, they are carried on now.
            if !pending.is_empty() && search.settled(0) {
                self.carry_on(search, &mut pending);
                if search.settled(0) {
                    break;
                }
            }
            let limit = give_up * search.chi_square();
            let r = self.brief(s, patience, limit);
            if r.termination.was_successful() {
                search.consider(r);
            } else if r.evaluations < patience * (self.setup.free.len() + 1) && r.chi_square > limit
            {
                search.abandon(r);
            } else {
                pending.push(r);
            }
        }
        self.carry_on(search, &mut pending);
    }

    /// The unfinished brief runs: the [`CARRIED_ON`] lowest in χ² carried on to convergence (from
    /// where they stopped), the others counted as they are.
    fn carry_on(&self, search: &mut start::Search, pending: &mut Vec<Run>) {
        pending.sort_by(|a, b| a.chi_square.total_cmp(&b.chi_square));
        for (i, r) in pending.drain(..).enumerate() {
            if i < CARRIED_ON {
                search.evaluations += r.evaluations;
                search.consider(self.screen(&r.params));
            } else {
                search.consider(r);
            }
        }
    }

    /// The best run's arcs swapped pairwise; then, unless independent starts agree on the optimum,
    /// moved along τ; and swapped once more when a move reached a better basin, whose arcs may be
    /// misassigned.
    fn arc_moves(&self, search: &mut start::Search, t: &[start::Term]) {
        let Some(before) = search.best.as_ref().map(|b| b.chi_square) else {
            return;
        };
        self.swaps(search, t);
        // Independent starts that agree on the optimum make moving arcs elsewhere pointless.
        if search.agreeing < AGREEING && !search.noise_like_consensus() {
            let b = search.best.as_ref().expect("a run was considered");
            let moves = start::arc_relocations(&self.ctx, t, &b.params);
            self.staged(search, &moves, MOVE_PATIENCE, f64::INFINITY);
        }
        if search.chi_square() < before {
            self.swaps(search, t);
        }
    }

    /// Runs from the best run's arcs swapped pairwise.
    fn swaps(&self, search: &mut start::Search, t: &[start::Term]) {
        let b = search.best.as_ref().expect("a run was considered");
        for s in &start::arc_swaps(&self.ctx, t, &b.params) {
            search.consider(self.screen(s));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::von_neumann_ratio;
    use rand::rngs::Xoshiro256PlusPlus;
    use rand::{RngExt, SeedableRng};
    use rand_distr::StandardNormal;

    /// Interleaved residuals (real, imaginary) from two series.
    fn interleave(re: &[f64], im: &[f64]) -> Vec<f64> {
        re.iter().zip(im).flat_map(|(&a, &b)| [a, b]).collect()
    }

    /// Von Neumann (1941, "Distribution of the ratio of the mean square successive difference to the
    /// variance", Annals of Mathematical Statistics 12, 367): for m independent N(0, σ²) values the
    /// successive differences have E Σ(x_{k+1} − x_k)² = 2(m − 1)σ² against E Σ x² = mσ², so the ratio
    /// is near 2(m − 1)/m, with a standard deviation near 2/√m; a smooth trend gives nearly 0.
    #[test]
    fn von_neumann_ratio_tells_noise_from_a_trend() {
        let m = 2000;
        let mut rng = Xoshiro256PlusPlus::seed_from_u64(7);
        let mut normal = || -> f64 { rng.sample(StandardNormal) };
        let re: Vec<f64> = (0..m).map(|_| normal()).collect();
        let im: Vec<f64> = (0..m).map(|_| normal()).collect();
        let order: Vec<usize> = (0..m).collect();
        let eta = von_neumann_ratio(&interleave(&re, &im), &order);
        let expected = 2.0 * (m as f64 - 1.0) / m as f64;
        assert!(
            (eta - expected).abs() < 4.0 * 2.0 / (2.0 * m as f64).sqrt(),
            "{eta}"
        );

        // A residual that follows a trend over the spectrum: far below 1.
        let x = |k: usize| k as f64 / m as f64 * std::f64::consts::PI;
        let trend_re: Vec<f64> = (0..m).map(|k| (3.0 * x(k)).sin()).collect();
        let trend_im: Vec<f64> = (0..m).map(|k| (2.0 * x(k)).cos()).collect();
        let smooth = von_neumann_ratio(&interleave(&trend_re, &trend_im), &order);
        assert!(smooth < 0.01, "{smooth}");

        // The points are taken in frequency order, not storage order: a trend stored with every
        // other point swapped is still a trend.
        let mut shuffled_re = trend_re.clone();
        let mut shuffled_im = trend_im.clone();
        let mut by_frequency = order.clone();
        for k in (0..m - 1).step_by(2) {
            shuffled_re.swap(k, k + 1);
            shuffled_im.swap(k, k + 1);
            by_frequency.swap(k, k + 1);
        }
        let reordered = von_neumann_ratio(&interleave(&shuffled_re, &shuffled_im), &by_frequency);
        assert!(
            (reordered - smooth).abs() < 1e-12,
            "{reordered} vs {smooth}"
        );
        assert_eq!(von_neumann_ratio(&[0.0, 0.0, 0.0, 0.0], &[0, 1]), 0.0);
    }
}
