//! Coverage of the reported standard errors: over many noisy spectra of the same circuit, an estimate
//! should lie within one standard error of the truth about 68.27 % of the time (within two, 95.45 %),
//! if the covariance s²·(JᵀJ)⁻¹ is right and the fit reaches the optimum.
//!
//! Tolerance. The k-th parameter over S independent seeds is a binomial count, so its coverage fraction
//! has standard deviation √(p(1−p)/S). Estimates of one fit are correlated, so the fraction pooled over
//! all parameters is no better than that either; both are checked against p ± 3·√(p(1−p)/S) with
//! S = number of fits (conservative for the pooled figure, exact for each parameter). Finally the
//! fraction over every estimate of both circuits (n = 2000) is checked against p ± 3·√2·√(p(1−p)/n):
//! the binomial spread of n independent estimates, widened by √2 because estimates of one fit are
//! correlated (their indicator variables less so than the parameters themselves).

use eis_core::circuit::{Circuit, parse};
use eis_core::eval::{Plan, log_frequencies};
use eis_core::fit::{FitSettings, fit};
use eis_core::simulate::{Noise, simulate};

/// Seeds per circuit; seed s of circuit c is `SEED_BASE + 1000·c + s`.
const SEEDS: u64 = 200;
const SEED_BASE: u64 = 0xC0FE;
/// Noise relative to |Z| on real and imaginary parts.
const NOISE: f64 = 0.005;
/// Normal probability of |x| < 1 and |x| < 2.
const P1: f64 = 0.682_689_492;
const P2: f64 = 0.954_499_736;

fn library(name: &str) -> Circuit {
    let path = format!("{}/../circuits/{name}", env!("CARGO_MANIFEST_DIR"));
    parse(&std::fs::read_to_string(path).unwrap()).unwrap()
}

/// Checks `within/total` against `p ± 3·√(p(1−p)/effective_n)`.
fn check(label: &str, within: usize, total: usize, effective_n: f64, p: f64) {
    let frac = within as f64 / total as f64;
    let tol = 3.0 * (p * (1.0 - p) / effective_n).sqrt();
    println!("{label}: {within}/{total} = {frac:.3} (expected {p:.3} ± {tol:.3})");
    assert!(
        (frac - p).abs() <= tol,
        "{label}: {within}/{total} = {frac:.3}, expected {p:.3} ± {tol:.3}"
    );
}

#[test]
fn one_standard_error_covers_the_truth_about_68_percent_of_the_time() {
    let freqs = log_frequencies(1e5, 1e-2, 10);
    let (mut all1, mut all2, mut all) = (0, 0, 0);
    for (ci, name) in ["single-interface.circ", "randles-transmissive.circ"]
        .into_iter()
        .enumerate()
    {
        let c = library(name);
        let truth = c.default_values();
        let mut blank = c.clone();
        for p in &mut blank.params {
            p.initial = None;
        }
        let plan = Plan::compile(&c);
        let np = truth.len();
        let mut in1 = vec![0usize; np];
        let mut in2 = vec![0usize; np];
        for s in 0..SEEDS {
            let seed = SEED_BASE + 1000 * ci as u64 + s;
            let data = simulate(
                &plan,
                &truth,
                &freqs,
                Some(Noise {
                    relative: NOISE,
                    seed,
                }),
            );
            let r = fit(&blank, &data, &FitSettings::default(), None).unwrap();
            assert!(r.converged, "{name} seed {seed}: {}", r.termination);
            for k in 0..np {
                let se = r.stderr[k].unwrap();
                let dev = (r.values[k] - truth[k]).abs() / se;
                in1[k] += usize::from(dev < 1.0);
                in2[k] += usize::from(dev < 2.0);
            }
        }
        for (k, p) in c.params.iter().enumerate() {
            check(
                &format!("{name} {} 1 SE", p.name),
                in1[k],
                SEEDS as usize,
                SEEDS as f64,
                P1,
            );
            check(
                &format!("{name} {} 2 SE", p.name),
                in2[k],
                SEEDS as usize,
                SEEDS as f64,
                P2,
            );
        }
        let total = np * SEEDS as usize;
        all1 += in1.iter().sum::<usize>();
        all2 += in2.iter().sum::<usize>();
        all += total;
        check(
            &format!("{name} pooled 1 SE"),
            in1.iter().sum(),
            total,
            SEEDS as f64,
            P1,
        );
        check(
            &format!("{name} pooled 2 SE"),
            in2.iter().sum(),
            total,
            SEEDS as f64,
            P2,
        );
    }
    // Halving n widens the binomial spread by √2 (see the module doc).
    let effective = all as f64 / 2.0;
    check("every estimate 1 SE", all1, all, effective, P1);
    check("every estimate 2 SE", all2, all, effective, P2);
}
