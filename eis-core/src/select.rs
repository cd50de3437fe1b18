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

/// One member of the family.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Member {
    /// Number of arcs, 1 to 3.
    pub arcs: usize,
    /// Diffusion in the last arc's resistive branch.
    pub diffusion: Diffusion,
    /// Series inductance `L0`.
    pub inductance: bool,
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
        let mut text = parts.join(" + ");
        for k in 1..=self.arcs {
            text.push_str(&format!("\nQ{k}.n = 0.5..1"));
        }
        text
    }

    /// The circuit.
    pub fn circuit(&self) -> Circuit {
        parse(&self.circuit_text()).expect("family circuits are valid")
    }

    /// A short label, e.g. `2 arcs + transmissive diffusion + inductance`.
    pub fn label(&self) -> String {
        let mut s = format!("{} arc{}", self.arcs, if self.arcs == 1 { "" } else { "s" });
        if self.diffusion != Diffusion::None {
            s.push_str(&format!(" + {} diffusion", self.diffusion.as_str()));
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
                });
            }
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
}

impl Default for SelectOptions {
    fn default() -> Self {
        SelectOptions {
            fit: FitSettings::default().with_starts(3).with_arc_moves(false),
            prune: true,
            parallel: true,
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
    /// Number of arcs.
    pub arcs: usize,
    /// Diffusion: `none`, `transmissive` or `reflective`.
    pub diffusion: Diffusion,
    /// Series inductance.
    pub inductance: bool,
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
            arcs: c.member.arcs,
            diffusion: c.member.diffusion,
            inductance: c.member.inductance,
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
    let clearly_inductive = spectrum
        .z
        .iter()
        .any(|z| z.im > CLEARLY_INDUCTIVE * z.norm());
    let seed: Option<DrtResult> = if spectrum.frequency_hz.len() == spectrum.z.len() {
        drt(spectrum, DrtOptions::default().with_inductance(inductive)).ok()
    } else {
        None
    };
    let peaks = seed.as_ref().map(|d| d.peaks.len());

    let mut candidates: Vec<Candidate> = family()
        .into_iter()
        .map(|member| {
            let skip = if !options.prune {
                None
            } else if let Some(p) = peaks.filter(|&p| member.arcs > p + 1) {
                Some(format!(
                    "skipped: the DRT shows {p} peak{}, too few for {} arcs",
                    if p == 1 { "" } else { "s" },
                    member.arcs
                ))
            } else if member.inductance && !inductive {
                Some("skipped: no point has a positive imaginary part, so no inductance".to_owned())
            } else if !member.inductance && clearly_inductive {
                Some("skipped: inductive points need a series inductance".to_owned())
            } else {
                None
            };
            Candidate {
                member,
                circuit: member.circuit(),
                result: None,
                tier: None,
                rank: None,
                reason: skip.unwrap_or_default(),
            }
        })
        .collect();

    let todo: Vec<usize> = (0..candidates.len())
        .filter(|&i| candidates[i].reason.is_empty())
        .collect();
    let fit_one = |i: usize| {
        fit_seeded(
            &candidates[i].circuit,
            spectrum,
            &options.fit,
            None,
            seed.as_ref(),
        )
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

    // Fitted candidates by (tier, BIC); the rest keep the family order.
    candidates.sort_by(|a, b| match (&a.result, &b.result) {
        (Some(ra), Some(rb)) => a.tier.cmp(&b.tier).then(ra.bic.total_cmp(&rb.bic)),
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
        } else if c.tier == best_tier {
            format!("BIC {:.1} above the winner", r.bic - best_bic)
        } else {
            "ranks below every candidate of a better tier".to_owned()
        };
        c.reason = format!("{place}; {}", c.reason);
    }
    Ok(Selection {
        drt_peaks: peaks,
        candidates,
    })
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
pub const SELECTION_RULE: &str = "tiers (1 converged with random residuals and determined parameters, 2 some parameter undetermined or at a bound, 3 residuals with a trend, 4 not converged), then lowest BIC within a tier";

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
mod tests {
    use super::*;

    #[test]
    fn the_family_has_eighteen_distinct_parseable_members() {
        let f = family();
        assert_eq!(f.len(), 18);
        let texts: std::collections::BTreeSet<String> =
            f.iter().map(|m| m.circuit_text()).collect();
        assert_eq!(texts.len(), 18);
        for m in &f {
            let c = m.circuit();
            assert!(crate::fit::start::recognise(&c).is_some(), "{}", m.label());
            let q = c.param_index(&format!("Q{}.n", m.arcs)).unwrap();
            assert_eq!(c.bounds(q), (0.5, 1.0));
        }
        assert_eq!(
            Member {
                arcs: 2,
                diffusion: Diffusion::Transmissive,
                inductance: true
            }
            .circuit_text()
            .lines()
            .next(),
            Some("L0 + R0 + R1|Q1 + (R2 + Wtd)|Q2")
        );
    }

    #[test]
    fn bad_input_is_an_error_not_a_panic() {
        let empty = Spectrum::new(vec![], vec![]);
        assert!(matches!(
            select(&empty, &SelectOptions::default()),
            Err(SelectError::Fit(FitError::Empty))
        ));
        let nan = Spectrum::new(
            vec![1.0, 2.0, 3.0],
            vec![num_complex::Complex64::new(f64::NAN, 0.0); 3],
        );
        assert!(select(&nan, &SelectOptions::default()).is_err());
    }
}
