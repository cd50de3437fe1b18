//! Automatic model choice: a documented family of battery circuits, each fitted with DRT-seeded
//! starting values, ranked by BIC together with a check of the residuals.
//!
//! # The family
//!
//! Every member is an ohmic resistance `R0` in series with one to three depressed arcs `Rk|Qk` (a
//! resistance in parallel with a constant-phase element, exponent bounded to 0.5..1), optionally with
//! finite-length diffusion in the resistive branch of the last (slowest) arc, Randles style, and
//! optionally with a series inductance `L0`:
//!
//! | arcs | diffusion in the last arc | inductance | example circuit |
//! |---|---|---|---|
//! | 1, 2, 3 | none | no / yes | `R0 + R1\|Q1 + R2\|Q2` |
//! | 1, 2, 3 | transmissive, `Wtd` (tanh form) | no / yes | `R0 + R1\|Q1 + (R2 + Wtd)\|Q2` |
//! | 1, 2, 3 | reflective, `Wrd` (coth form) | no / yes | `L0 + R0 + (R1 + Wrd)\|Q1` |
//!
//! 18 members in all ([`family`]). Arcs are numbered from the fastest (highest frequency) to the slowest.
//!
//! For cells with porous electrodes and diffusion that goes on below the lowest frequency,
//! [`physics_family`] adds 8 members (on by default, [`SelectOptions::with_physics`]): a tail in
//! series after the arcs, `Wd` (semi-infinite Warburg) or `Wrd` (reflective), on 2 arcs, a reflective
//! tail on 3 arcs, and two porous electrodes `Pe1 + Pe2` with a Warburg tail, each without / with
//! inductance: `R0 + Pe1 + Pe2 + Wd`. They are skipped when −Z″ does not rise over the three lowest
//! frequencies (no tail to describe).
//!
//! # Selection
//!
//! 1. A DRT of the spectrum (automatic λ by GCV; with an inductance term when some point has a positive
//!    imaginary part) seeds every fit ([`crate::fit::fit_seeded`]) and prunes the family:
//!    - members with more arcs than the DRT has peaks plus one are skipped (their extra arcs have no
//!      feature to describe);
//!    - members with a series inductance are skipped when no point has Z″ > 0 (no inductive point), and
//!      members without one are skipped when some point is clearly inductive (Z″ > 5 % of |Z|), which
//!      no member without an inductance can produce.
//! 2. Each remaining member is fitted (in parallel over the available cores, with scoped threads).
//! 3. Candidates are put in tiers, then ordered by BIC (Schwarz 1978, Ann. Stat. 6, 461) within a tier:
//!    - tier 1: converged, residuals without a trend, every free parameter determined;
//!    - tier 2: converged, residuals without a trend, but some parameter not determined by the data
//!      (relative standard error above 100 %, no standard error) or at a bound: the model has more
//!      than the data support;
//!    - tier 3: residuals that follow a trend (runs test, [`crate::fit::FitResult::systematic_residuals`]):
//!      the model misses a feature of the spectrum;
//!    - tier 4: the fit did not converge.
//!
//!    A candidate whose decomposition is physically implausible ([`crate::roles::implausible`]: a
//!    kinetic arc or porous interface beyond the measured window, a kinetic arc fitted by a diffusion
//!    element, a diffusion pseudo-capacitance in a Randles arc) is **rejected**, ranked after every
//!    other candidate, when a plausible converged candidate reaches at most 20 times its χ².
//!
//!    A lumped candidate with an arc of CPE exponent n ≤ [`DISTRIBUTED_EXPONENT`] draws a porous
//!    electrode (45° branch, pore and interface together) as one arc, and its resistance mixes pore
//!    resistance into the charge transfer: it is rejected the same way when a plausible converged
//!    porous candidate reaches at most 20 times its χ².
//!
//!    "Its χ²" is at least the χ² of a fit off by [`MEASUREMENT_ACCURACY`] (0.5 %) at every point:
//!    misfits below what a measurement resolves do not make a decomposition more credible (on
//!    noise-free data a wrong decomposition can fit to 0.1 % and a right one to 1 %).
//!
//!    A porous member whose fit from the usual starts is implausible or did not converge is fitted
//!    again from [`POROUS_STARTS`] starts; the plausible, then converged, then lower-χ² of the two
//!    results is kept.
//!
//!    The first candidate is the winner; each candidate carries the reason for its place.
//!
//! ```
//! use eis_core::{circuit::parse, eval::{log_frequencies, Plan}, simulate::{simulate, Noise}};
//! use eis_core::select::{select, SelectOptions};
//! let c = parse("R0 + R1|Q1").unwrap();
//! // Noisy data, as measured (without noise every richer member fits to round-off as well, and χ² at
//! // round-off level cannot rank them).
//! let noise = Some(Noise { relative: 0.005, seed: 3 });
//! let data = simulate(&Plan::compile(&c), &[1.0, 10.0, 1e-4, 0.9], &log_frequencies(1e5, 1e-2, 8), noise);
//! let s = select(&data, &SelectOptions::default()).unwrap();
//! assert_eq!(s.winner().member.arcs, 1);
//! assert_eq!(s.winner().member.diffusion, eis_core::select::Diffusion::None);
//! ```

use crate::circuit::{Circuit, parse};
use crate::drt::{DrtOptions, DrtResult, drt};
use crate::fit::{FitError, FitResult, FitSettings, fit_seeded};
use crate::spectrum::Spectrum;
use serde::{Deserialize, Serialize};

/// Finite-length diffusion in a family member.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Diffusion {
    /// No diffusion element.
    None,
    /// Transmissive boundary (tanh form), element `Wtd`.
    Transmissive,
    /// Reflective boundary (coth form), element `Wrd`.
    Reflective,
}

impl Diffusion {
    /// The word used in outputs: `none`, `transmissive`, `reflective`.
    pub fn as_str(self) -> &'static str {
        match self {
            Diffusion::None => "none",
            Diffusion::Transmissive => "transmissive",
            Diffusion::Reflective => "reflective",
        }
    }
}

/// A diffusion tail in series after the arcs: the slow end of a cell whose diffusion still rises at
/// the lowest measured frequency.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Tail {
    /// No tail.
    #[default]
    None,
    /// Semi-infinite Warburg `Wd` in series.
    Warburg,
    /// Reflective finite diffusion `Wrd` in series (a blocking end: the tail turns capacitive).
    Reflective,
}

impl Tail {
    /// The word used in outputs: `none`, `warburg`, `reflective`.
    pub fn as_str(self) -> &'static str {
        match self {
            Tail::None => "none",
            Tail::Warburg => "warburg",
            Tail::Reflective => "reflective",
        }
    }
}

/// One member of the family.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Member {
    /// Number of arcs (or porous electrodes), 1 to 3.
    pub arcs: usize,
    /// Diffusion in the last arc's resistive branch.
    pub diffusion: Diffusion,
    /// Series inductance `L0`.
    pub inductance: bool,
    /// A diffusion tail in series after the arcs.
    #[serde(default)]
    pub tail: Tail,
    /// The arcs are porous electrodes (uniform transmission lines `Pe`) instead of `R|Q`.
    #[serde(default)]
    pub porous: bool,
}

impl Member {
    /// The circuit text, e.g. `L0 + R0 + R1|Q1 + (R2 + Wtd)|Q2`, with the CPE exponents bounded to 0.5..1.
    pub fn circuit_text(&self) -> String {
        let mut parts = Vec::new();
        if self.inductance {
            parts.push("L0".to_owned());
        }
        parts.push("R0".to_owned());
        for k in 1..=self.arcs {
            if self.porous {
                parts.push(format!("Pe{k}"));
                continue;
            }
            let w = match self.diffusion {
                Diffusion::Transmissive if k == self.arcs => Some("Wtd"),
                Diffusion::Reflective if k == self.arcs => Some("Wrd"),
                _ => None,
            };
            parts.push(match w {
                Some(w) => format!("(R{k} + {w})|Q{k}"),
                None => format!("R{k}|Q{k}"),
            });
        }
        match self.tail {
            Tail::None => {}
            Tail::Warburg => parts.push("Wd".to_owned()),
            Tail::Reflective => parts.push("Wrd".to_owned()),
        }
        let mut text = parts.join(" + ");
        for k in 1..=self.arcs {
            if self.porous {
                text.push_str(&format!("\nPe{k}.n = 0.5..1"));
            } else {
                text.push_str(&format!("\nQ{k}.n = 0.5..1"));
            }
        }
        text
    }

    /// The circuit.
    pub fn circuit(&self) -> Circuit {
        parse(&self.circuit_text()).expect("family circuits are valid")
    }

    /// A short label, e.g. `2 arcs + transmissive diffusion + inductance`.
    pub fn label(&self) -> String {
        let plural = if self.arcs == 1 { "" } else { "s" };
        let mut s = if self.porous {
            format!("{} porous electrode{plural}", self.arcs)
        } else {
            format!("{} arc{plural}", self.arcs)
        };
        if self.diffusion != Diffusion::None {
            s.push_str(&format!(" + {} diffusion", self.diffusion.as_str()));
        }
        match self.tail {
            Tail::None => {}
            Tail::Warburg => s.push_str(" + Warburg tail"),
            Tail::Reflective => s.push_str(" + reflective tail"),
        }
        if self.inductance {
            s.push_str(" + inductance");
        }
        s
    }
}

/// The whole family: 1–3 arcs × no / transmissive / reflective diffusion × without / with inductance,
/// simplest first.
pub fn family() -> Vec<Member> {
    let mut out = Vec::new();
    for inductance in [false, true] {
        for arcs in 1..=3 {
            for diffusion in [
                Diffusion::None,
                Diffusion::Transmissive,
                Diffusion::Reflective,
            ] {
                out.push(Member {
                    arcs,
                    diffusion,
                    inductance,
                    tail: Tail::None,
                    porous: false,
                });
            }
        }
    }
    out
}

/// The members for cells with porous electrodes and a diffusion tail still rising at the lowest
/// frequency (tried besides [`family`] when [`SelectOptions::physics`] is on): 2 arcs followed by a
/// Warburg or a reflective tail, 3 arcs followed by a reflective tail, and two porous electrodes (one per electrode of a cell) followed by a
/// Warburg tail, without / with inductance. Kept small: each member costs a fit per spectrum.
pub fn physics_family() -> Vec<Member> {
    let mut out = Vec::new();
    for inductance in [false, true] {
        for (arcs, porous, tail) in [
            (2, false, Tail::Warburg),
            (2, false, Tail::Reflective),
            (3, false, Tail::Reflective),
            (2, true, Tail::Warburg),
        ] {
            out.push(Member {
                arcs,
                diffusion: Diffusion::None,
                inductance,
                tail,
                porous,
            });
        }
    }
    out
}

/// Settings of a model choice. Build with [`SelectOptions::default`] and the `with_*` setters.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SelectOptions {
    /// Settings of each candidate's fit. Default: [`FitSettings::default`] with 3 grid starts and no arc
    /// moves: with the DRT starts these assign the family's own spectra as often as the full settings
    /// (36/36 in `examples/select_study.rs`) at a third of the time.
    pub fit: FitSettings,
    /// Skip members the DRT and the sign of Z″ rule out (see the [module docs](self)). Default true.
    pub prune: bool,
    /// Fit candidates on several threads. Default true.
    pub parallel: bool,
    /// Also try the members of [`physics_family`] (porous electrodes, diffusion tails). Default true.
    pub physics: bool,
}

impl Default for SelectOptions {
    fn default() -> Self {
        SelectOptions {
            fit: FitSettings::default().with_starts(3).with_arc_moves(false),
            prune: true,
            parallel: true,
            physics: true,
        }
    }
}

impl SelectOptions {
    /// Sets the fit settings of every candidate.
    pub fn with_fit(mut self, fit: FitSettings) -> Self {
        self.fit = fit;
        self
    }
    /// Enables or disables pruning of the family.
    pub fn with_prune(mut self, on: bool) -> Self {
        self.prune = on;
        self
    }
    /// Enables or disables the members of [`physics_family`].
    pub fn with_physics(mut self, on: bool) -> Self {
        self.physics = on;
        self
    }
    /// Enables or disables fitting on several threads.
    pub fn with_parallel(mut self, on: bool) -> Self {
        self.parallel = on;
        self
    }
}

/// Why no model could be chosen.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum SelectError {
    /// The spectrum cannot be fitted by any member (the error of the simplest member tried).
    #[error("no candidate model could be fitted: {0}")]
    Fit(FitError),
}

/// One candidate of a model choice.
#[derive(Debug, Clone, PartialEq)]
pub struct Candidate {
    /// The family member.
    pub member: Member,
    /// Its circuit.
    pub circuit: Circuit,
    /// The fit; None when the member was skipped or could not be fitted.
    pub result: Option<FitResult>,
    /// Tier 1–4 (see the [module docs](self)); None when not fitted.
    pub tier: Option<u8>,
    /// Place in the ranking from 1 (the winner); None when not fitted.
    pub rank: Option<usize>,
    /// Whether its decomposition was rejected as implausible (a process beyond the data, a kinetic arc
    /// in a diffusion element) in favour of a plausible candidate of comparable χ².
    pub rejected: bool,
    /// Why the candidate is where it is, or why it was skipped.
    pub reason: String,
}

/// The outcome of a model choice: candidates in rank order (skipped ones last, simplest first).
#[derive(Debug, Clone, PartialEq)]
pub struct Selection {
    /// Number of DRT peaks found (None when the DRT could not be computed).
    pub drt_peaks: Option<usize>,
    /// Every member of the family, ranked.
    pub candidates: Vec<Candidate>,
}

impl Selection {
    /// The winning candidate (always fitted).
    pub fn winner(&self) -> &Candidate {
        &self.candidates[0]
    }

    /// One serialisable entry per candidate, in rank order, with its BIC relative to the winner's.
    pub fn entries(&self) -> Vec<CandidateEntry> {
        let best = self.winner().result.as_ref().map_or(0.0, |r| r.bic);
        self.candidates
            .iter()
            .map(|c| {
                let mut e = CandidateEntry::from(c);
                e.delta_bic = e.bic.map(|b| b - best);
                e
            })
            .collect()
    }
}

/// A candidate as it appears in the `candidates` list of `eis fit --model auto --json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CandidateEntry {
    /// Canonical circuit expression.
    pub model: String,
    /// Short label (`2 arcs + transmissive diffusion`).
    pub label: String,
    /// Which member of the family: its keys (`arcs`, `diffusion`, `inductance`, `tail`, `porous`)
    /// stand in the entry itself.
    #[serde(flatten)]
    pub member: Member,
    /// Whether the decomposition was rejected as implausible.
    #[serde(default)]
    pub rejected: bool,
    /// Whether the member was fitted.
    pub fitted: bool,
    /// Number of free parameters.
    pub parameters: usize,
    /// Bayesian information criterion (null when not fitted).
    pub bic: Option<f64>,
    /// Akaike information criterion (null when not fitted).
    pub aic: Option<f64>,
    /// Reduced χ² (null when not fitted).
    pub reduced_chi_square: Option<f64>,
    /// Whether the residuals follow a trend (null when not fitted).
    pub systematic_residuals: Option<bool>,
    /// Whether the fit converged (null when not fitted).
    pub converged: Option<bool>,
    /// BIC minus the winner's BIC (null when not fitted).
    pub delta_bic: Option<f64>,
    /// Tier 1–4 (null when not fitted).
    pub tier: Option<u8>,
    /// Rank from 1 (null when not fitted).
    pub rank: Option<usize>,
    /// Why it ranks there, or why it was skipped.
    pub reason: String,
}

impl From<&Candidate> for CandidateEntry {
    fn from(c: &Candidate) -> Self {
        let r = c.result.as_ref();
        CandidateEntry {
            model: crate::circuit::print_expression(&c.circuit),
            label: c.member.label(),
            member: c.member,
            rejected: c.rejected,
            fitted: r.is_some(),
            parameters: c.circuit.params.iter().filter(|p| !p.fixed).count(),
            bic: r.map(|r| r.bic),
            aic: r.map(|r| r.aic),
            reduced_chi_square: r.map(|r| r.reduced_chi_square),
            systematic_residuals: r.map(|r| r.systematic_residuals),
            converged: r.map(|r| r.converged),
            delta_bic: None,
            tier: c.tier,
            rank: c.rank,
            reason: c.reason.clone(),
        }
    }
}

/// Relative standard error above which a parameter counts as not determined (as in the fit's warnings).
const UNDETERMINED: f64 = 1.0;
/// An implausible decomposition is rejected when a plausible candidate's χ² is at most this many
/// times its own: a physically wrong reading is not worth less than a √20 ≈ 4.5-fold gain in rms
/// residual (a judgement, not a statistical test).
const COMPARABLE_CHI_SQUARE: f64 = 20.0;
/// Relative accuracy of a measured impedance below which misfits are not told apart when candidates
/// are compared for plausibility: 0.5 % of |Z| (impedance analysers and potentiostats state accuracies
/// of about 0.1–1 % over most of their range, common practice). On noise-free or very clean data, χ²
/// ratios between two fits both well below this level measure round-off-sized misfits, not physics.
pub const MEASUREMENT_ACCURACY: f64 = 0.005;
/// Grid starts of a porous member's second fit (the fit's default), when its fit from the usual starts
/// is implausible or did not converge: a transmission line's rail and interface resistances both
/// shape its one arc, so its χ² surface has long shallow valleys that three starts can miss.
pub const POROUS_STARTS: usize = 16;
/// CPE exponent at or below which a lumped arc `Rk|Qk` draws a distributed response. A double layer
/// on a real electrode has n ≈ 0.8–1 (common practice); the arc of a porous electrode, ionic rail and
/// interface together, has a 45° high-frequency branch (de Levie 1963, Electrochim. Acta 8, 751) that a
/// single CPE can only follow with n near 0.5. Such an arc's resistance mixes the pore resistance
/// (R_ion/3 at low frequency) into the charge transfer.
pub const DISTRIBUTED_EXPONENT: f64 = 0.7;
/// Z″/|Z| above which a point is clearly inductive.
const CLEARLY_INDUCTIVE: f64 = 0.05;

/// Chooses a model of the [`family`] for `spectrum`.
///
/// # Errors
///
/// [`SelectError::Fit`] when not one member can be fitted (an empty spectrum, non-finite values, too
/// few points, σ weighting without σ).
pub fn select(spectrum: &Spectrum, options: &SelectOptions) -> Result<Selection, SelectError> {
    let inductive = spectrum.z.iter().any(|z| z.im > 0.0);
    let seed: Option<DrtResult> = if spectrum.frequency_hz.len() == spectrum.z.len() {
        drt(spectrum, DrtOptions::default().with_inductance(inductive)).ok()
    } else {
        None
    };
    let peaks = seed.as_ref().map(|d| d.peaks.len());
    let mut members = family();
    if options.physics {
        members.extend(physics_family());
    }
    let pruning = options.prune.then(|| Pruning {
        rising: tail_rising(spectrum),
        peaks,
        inductive,
        clearly_inductive: spectrum
            .z
            .iter()
            .any(|z| z.im > CLEARLY_INDUCTIVE * z.norm()),
    });
    let mut candidates: Vec<Candidate> = members
        .into_iter()
        .map(|member| Candidate {
            member,
            circuit: member.circuit(),
            result: None,
            tier: None,
            rank: None,
            rejected: false,
            reason: pruning
                .as_ref()
                .and_then(|p| p.skip(&member))
                .unwrap_or_default(),
        })
        .collect();
    fit_candidates(&mut candidates, spectrum, options, seed.as_ref())?;
    reject_implausible(&mut candidates, spectrum);
    rank(&mut candidates);
    Ok(Selection {
        drt_peaks: peaks,
        candidates,
    })
}

/// What a spectrum shows that rules family members out before any fit.
struct Pruning {
    /// Whether −Z″ rises towards the lowest frequencies.
    rising: bool,
    /// Number of DRT peaks, when the DRT could be computed.
    peaks: Option<usize>,
    /// Whether any point has a positive imaginary part.
    inductive: bool,
    /// Whether a point is clearly inductive ([`CLEARLY_INDUCTIVE`]).
    clearly_inductive: bool,
}

impl Pruning {
    /// Why `member` is skipped, if it is.
    fn skip(&self, member: &Member) -> Option<String> {
        if member.tail != Tail::None && !self.rising {
            Some(
                "skipped: -Z'' does not rise towards the lowest frequencies, so no tail".to_owned(),
            )
        } else if let Some(p) = self.peaks.filter(|&p| member.arcs > p + 1) {
            Some(format!(
                "skipped: the DRT shows {p} peak{}, too few for {} arcs",
                if p == 1 { "" } else { "s" },
                member.arcs
            ))
        } else if member.inductance && !self.inductive {
            Some("skipped: no point has a positive imaginary part, so no inductance".to_owned())
        } else if !member.inductance && self.clearly_inductive {
            Some("skipped: inductive points need a series inductance".to_owned())
        } else {
            None
        }
    }
}

/// Fits every candidate not skipped (in parallel with [`SelectOptions::parallel`]), and gives each
/// its tier and reason, or why it could not be fitted.
///
/// A porous member whose fit from the usual starts is implausible or did not converge is fitted again
/// from [`POROUS_STARTS`] starts; of the two results the plausible one, then the converged one, then
/// the lower χ² is kept (more starts can also reach a lower χ² by turning an interface into the solid
/// diffusion below the window, hence the comparison).
fn fit_candidates(
    candidates: &mut [Candidate],
    spectrum: &Spectrum,
    options: &SelectOptions,
    seed: Option<&DrtResult>,
) -> Result<(), SelectError> {
    let todo: Vec<usize> = (0..candidates.len())
        .filter(|&i| candidates[i].reason.is_empty())
        .collect();
    let porous_fit = options
        .fit
        .with_starts(options.fit.starts.max(POROUS_STARTS));
    let fit_one = |i: usize| {
        let c = &candidates[i];
        let run = |s: &FitSettings| fit_seeded(&c.circuit, spectrum, s, None, seed);
        let first = run(&options.fit);
        if !c.member.porous {
            return first;
        }
        let key = |r: &FitResult| {
            (
                crate::roles::implausible(&c.circuit, r).is_some(),
                !r.converged,
            )
        };
        if first.as_ref().is_ok_and(|a| key(a) == (false, false)) {
            return first;
        }
        match (first, run(&porous_fit)) {
            (Ok(a), Ok(b)) => {
                let b_first = key(&b)
                    .cmp(&key(&a))
                    .then(b.chi_square.total_cmp(&a.chi_square))
                    .is_lt();
                Ok(if b_first { b } else { a })
            }
            (Ok(a), Err(_)) => Ok(a),
            (Err(_), b) => b,
        }
    };
    let outcomes: Vec<(usize, Result<FitResult, FitError>)> = if options.parallel {
        let threads = std::thread::available_parallelism()
            .map_or(1, |n| n.get())
            .clamp(1, todo.len().max(1));
        let next = std::sync::atomic::AtomicUsize::new(0);
        let mut all = Vec::new();
        std::thread::scope(|s| {
            let handles: Vec<_> = (0..threads)
                .map(|_| {
                    s.spawn(|| {
                        let mut mine = Vec::new();
                        loop {
                            let k = next.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                            let Some(&i) = todo.get(k) else { break };
                            mine.push((i, fit_one(i)));
                        }
                        mine
                    })
                })
                .collect();
            for h in handles {
                all.extend(h.join().expect("a candidate fit panicked"));
            }
        });
        all
    } else {
        todo.iter().map(|&i| (i, fit_one(i))).collect()
    };

    let mut first_error = None;
    for (i, outcome) in outcomes {
        match outcome {
            Ok(r) => {
                let (tier, why) = classify(&candidates[i].circuit, &r);
                candidates[i].tier = Some(tier);
                candidates[i].reason = why;
                candidates[i].result = Some(r);
            }
            Err(e) => {
                candidates[i].reason = format!("not fitted: {e}");
                if first_error.as_ref().is_none_or(|(j, _)| i < *j) {
                    first_error = Some((i, e));
                }
            }
        }
    }
    if candidates.iter().all(|c| c.result.is_none()) {
        return Err(SelectError::Fit(match first_error {
            Some((_, e)) => e,
            None => FitError::Empty,
        }));
    }
    Ok(())
}

/// Marks as rejected the decompositions that put a process beyond the data or a kinetic arc into a
/// diffusion element, and the lumped arcs that draw a distributed (porous-electrode) response, when a
/// plausible candidate (for the latter, a porous one) fits comparably.
fn reject_implausible(candidates: &mut [Candidate], spectrum: &Spectrum) {
    let flaws: Vec<Option<String>> = candidates
        .iter()
        .map(|c| {
            c.result
                .as_ref()
                .and_then(|r| crate::roles::implausible(&c.circuit, r))
        })
        .collect();
    // χ² below what a measurement resolves cannot rank candidates: compare against at least the
    // χ² of a fit off by MEASUREMENT_ACCURACY at every point.
    let floor = |r: &FitResult| {
        r.chi_square
            .max(2.0 * spectrum.z.len() as f64 * MEASUREMENT_ACCURACY.powi(2))
    };
    // The plausible, converged candidate `admit` lets in with the lowest BIC among those that fit
    // within COMPARABLE_CHI_SQUARE times the χ² of `r`, in words.
    let better = |r: &FitResult, admit: fn(&Candidate) -> bool| {
        candidates
            .iter()
            .zip(&flaws)
            .filter(|(o, f)| admit(o) && f.is_none())
            .filter_map(|(o, _)| {
                o.result
                    .as_ref()
                    .filter(|or| or.converged)
                    .map(|or| (o, or))
            })
            .filter(|(_, or)| or.chi_square <= COMPARABLE_CHI_SQUARE * floor(r))
            .min_by(|x, y| x.1.bic.total_cmp(&y.1.bic))
            .map(|(o, _)| {
                format!(
                    "while {} fits within {COMPARABLE_CHI_SQUARE}x its chi-square",
                    o.member.label()
                )
            })
    };
    let mut rejected: Vec<Option<String>> = vec![None; candidates.len()];
    for (i, c) in candidates.iter().enumerate() {
        let (Some(flaw), Some(r)) = (&flaws[i], &c.result) else {
            continue;
        };
        if let Some(o) = better(r, |_| true) {
            rejected[i] = Some(format!("rejected: {flaw}, {o}"));
        }
    }
    for (i, c) in candidates.iter().enumerate() {
        if rejected[i].is_some() || c.member.porous {
            continue;
        }
        let Some(r) = &c.result else { continue };
        let Some(arc) = distributed_arc(&c.circuit, r) else {
            continue;
        };
        if let Some(o) = better(r, |o| o.member.porous) {
            rejected[i] = Some(format!("rejected: {arc}, {o}"));
        }
    }
    for (c, why) in candidates.iter_mut().zip(rejected) {
        if let Some(why) = why {
            c.rejected = true;
            c.reason = why;
        }
    }
}

/// Sorts the fitted candidates by (rejected, tier, BIC), the rest keeping the family order, and gives
/// each fitted one its rank and the reason for it.
fn rank(candidates: &mut [Candidate]) {
    candidates.sort_by(|a, b| match (&a.result, &b.result) {
        (Some(ra), Some(rb)) => a
            .rejected
            .cmp(&b.rejected)
            .then(a.tier.cmp(&b.tier))
            .then(ra.bic.total_cmp(&rb.bic)),
        (Some(_), None) => std::cmp::Ordering::Less,
        (None, Some(_)) => std::cmp::Ordering::Greater,
        (None, None) => std::cmp::Ordering::Equal,
    });
    let best_bic = candidates[0].result.as_ref().map_or(0.0, |r| r.bic);
    let best_tier = candidates[0].tier;
    for (k, c) in candidates.iter_mut().enumerate() {
        let Some(r) = &c.result else { continue };
        c.rank = Some(k + 1);
        let place = if k == 0 {
            "winner: best tier, lowest BIC in it".to_owned()
        } else if c.rejected {
            "ranks below every plausible candidate".to_owned()
        } else if c.tier == best_tier {
            format!("BIC {:.1} above the winner", r.bic - best_bic)
        } else {
            "ranks below every candidate of a better tier".to_owned()
        };
        c.reason = format!("{place}; {}", c.reason);
    }
}

/// The first lumped arc of `c` (fitted as `r`) whose CPE exponent is at most
/// [`DISTRIBUTED_EXPONENT`], in words: a porous electrode read as one arc.
fn distributed_arc(c: &Circuit, r: &FitResult) -> Option<String> {
    c.elements
        .iter()
        .filter(|e| e.kind.is_capacitive())
        .find_map(|e| {
            let n = *r.values.get(e.first_param + e.kind.exponent()?)?;
            (n <= DISTRIBUTED_EXPONENT).then(|| {
                format!(
                    "its arc {} has n = {n:.2}, a distributed (porous-electrode) response read as one arc",
                    e.name
                )
            })
        })
}

/// Whether −Z″ rises towards the lowest frequencies (over the three lowest points): a diffusion tail
/// that goes on beyond the data.
fn tail_rising(s: &Spectrum) -> bool {
    let mut pts: Vec<(f64, f64)> = s
        .frequency_hz
        .iter()
        .zip(&s.z)
        .filter(|(f, z)| f.is_finite() && z.im.is_finite())
        .map(|(&f, z)| (f, -z.im))
        .collect();
    pts.sort_by(|a, b| a.0.total_cmp(&b.0));
    pts.len() >= 3 && pts[0].1 > pts[1].1 && pts[1].1 > pts[2].1 && pts[0].1 > 0.0
}

/// The tier of a fitted candidate and the reason in words.
fn classify(c: &Circuit, r: &FitResult) -> (u8, String) {
    if !r.converged {
        return (4, "the fit did not converge".to_owned());
    }
    if r.systematic_residuals {
        return (
            3,
            "residuals follow a trend (runs test): the model misses a feature".to_owned(),
        );
    }
    let weak: Vec<&str> = r
        .free
        .iter()
        .filter(|&&i| {
            r.at_bound[i]
                || r.stderr[i].is_none()
                || r.relative_error(i).is_some_and(|e| e > UNDETERMINED)
        })
        .map(|&i| c.params[i].name.as_str())
        .collect();
    if weak.is_empty() {
        (1, "random residuals, every parameter determined".to_owned())
    } else {
        (
            2,
            format!(
                "random residuals, but not determined by the data or at a bound: {}",
                weak.join(", ")
            ),
        )
    }
}

/// The JSON of `eis fit --model auto`: the winner's fit document with the ranked candidates beside it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AutoDocument {
    /// The winner's fit document (its keys appear at the top level).
    #[serde(flatten)]
    pub fit: crate::report::FitDocument,
    /// Number of DRT peaks that guided the choice.
    pub drt_peaks: Option<usize>,
    /// How candidates were ranked.
    pub selection_rule: String,
    /// Every candidate, in rank order, skipped ones last.
    pub candidates: Vec<CandidateEntry>,
}

/// The rule of [`select`] in one sentence, as reported in [`AutoDocument::selection_rule`].
pub const SELECTION_RULE: &str = "tiers (1 converged with random residuals and determined parameters, 2 some parameter undetermined or at a bound, 3 residuals with a trend, 4 not converged), then lowest BIC within a tier; implausible decompositions (a kinetic process beyond the data or in a diffusion element; an arc with CPE exponent at most 0.7, a porous electrode read as one arc, when a porous candidate is plausible) after the rest when a plausible candidate fits within 20x chi-square, chi-square counted as at least that of a 0.5 % misfit at every point";

/// Builds the document of a model choice from the winner's fit document.
pub fn auto_document(selection: &Selection, fit: crate::report::FitDocument) -> AutoDocument {
    AutoDocument {
        fit,
        drt_peaks: selection.drt_peaks,
        selection_rule: SELECTION_RULE.to_owned(),
        candidates: selection.entries(),
    }
}

#[cfg(test)]
mod tests;
