//! True parameters of the members of the automatic model-choice family, shared by the test
//! `tests/select.rs` and the example `examples/select_study.rs` (each includes this file with
//! `#[path]`), so that the study measures the spectra the test checks.

use eis_core::select::{Diffusion, Member};

/// Arcs (R in Ω, τ in s, CPE exponent), fastest first, one decade and more apart.
pub const ARCS: [(f64, f64, f64); 3] = [(3.0, 2e-5, 0.9), (10.0, 1e-3, 0.85), (6.0, 3e-2, 0.9)];

/// True parameters of a member: R0 = 1 Ω, L0 = 2 µH, arcs from [`ARCS`] (one arc: the middle one),
/// transmissive diffusion R = 15 Ω, τ = 5 s; reflective R = 20 Ω, τ = 20 s.
pub fn truth(m: &Member) -> Vec<f64> {
    let c = m.circuit();
    let mut v = c.default_values();
    let mut set = |name: &str, x: f64| v[c.param_index(name).unwrap()] = x;
    set("R0", 1.0);
    if m.inductance {
        set("L0", 2e-6);
    }
    let arcs: &[(f64, f64, f64)] = match m.arcs {
        1 => &ARCS[1..2],
        2 => &ARCS[..2],
        _ => &ARCS,
    };
    for (k, &(r, tau, n)) in arcs.iter().enumerate() {
        set(&format!("R{}", k + 1), r);
        set(&format!("Q{}.Q", k + 1), tau.powf(n) / r);
        set(&format!("Q{}.n", k + 1), n);
    }
    match m.diffusion {
        Diffusion::None => {}
        Diffusion::Transmissive => {
            set("Wtd.R", 15.0);
            set("Wtd.tau", 5.0);
        }
        Diffusion::Reflective => {
            set("Wrd.R", 20.0);
            set("Wrd.tau", 20.0);
        }
    }
    v
}
