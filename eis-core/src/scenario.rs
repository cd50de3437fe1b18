//! An invented campaign for the demo and the campaign tests, built by our own simulator.
//!
//! Five laboratory zinc–manganese-oxide cells with a mildly acidic aqueous zinc sulfate electrolyte,
//! measured at 20, 50 and 80 % SOC every 25 cycles from cycle 0 to 300. The cells are described by
//! `L0 + R0 + Rf|Qf + (Rct + Wtd)|Qdl` (cable inductance, ohmic resistance, surface film, charge transfer
//! with transmissive diffusion). Charge transfer is slowest at the ends of the SOC range.
//!
//! Planted behaviour (the numbers are invented, chosen to look like a lab cell):
//! - `Z1`, `Z5`: healthy, a few percent of slow growth;
//! - `Z2`: a contact problem — the ohmic resistance grows from cycle 150 on (+70 % by cycle 300);
//! - `Z3`: an interface film — the film resistance grows from cycle 100 on (×4 by cycle 300);
//! - `Z4`: a late soft short — from cycle 250 a resistive path of 1.5 Ω shunts the cell;
//! - one file is corrupt (`Z5` at cycle 175, 50 % SOC) and one spectrum drifts during its sweep (`Z1` at
//!   cycle 200, 50 % SOC: the charge-transfer resistance rises by 40 % while it is measured).
//!
//! Each cell's files are written in a different export shape (delimiters, decimal commas, units,
//! −Z″ columns, |Z| with phase, preambles, encodings), as a lab's mixed instruments would.

use crate::circuit::parse;
use crate::eval::{Plan, angular, log_frequencies};
use crate::simulate::{Noise, add_noise};
use num_complex::Complex64;

/// The model the demo fits.
pub const MODEL: &str = "L0 + R0 + Rf|Qf + (Rct + Wtd)|Qdl";

/// The circuit file text of the demo model, with starting bounds and roles.
pub const MODEL_FILE: &str = "# Demo model: zinc-manganese-oxide lab cell\n\
# series inductance of the leads, ohmic resistance, surface film, charge transfer with finite diffusion\n\
L0 + R0 + Rf|Qf + (Rct + Wtd)|Qdl\n\
Qf.n = 0.5..1\n\
Qdl.n = 0.5..1\n\
role Rf = film\n\
role Rct = charge-transfer\n";

/// The one export file of the campaign that is cut short and garbled (no spectrum can be read from it).
pub const CORRUPT_FILE: &str = "Z5_c175_soc50.csv";

/// The file-name pattern of the demo files.
pub const NAME_PATTERN: &str = "{cell}_c{cycle}_soc{soc}";

/// One file of the campaign.
#[derive(Debug, Clone, PartialEq)]
pub struct DemoFile {
    /// File name.
    pub name: String,
    /// Contents.
    pub bytes: Vec<u8>,
}

/// Parameters of a cell at a cycle and SOC (in the order of [`MODEL`]), and the
/// shunt resistance of a soft short if one is present.
pub(crate) fn cell_state(cell: &str, cycle: f64, soc: f64) -> ([f64; 10], Option<f64>) {
    let s = soc / 100.0;
    // Charge transfer is slowest near empty and full.
    let soc_factor = 0.25 / (s * (1.0 - s)).max(0.05);
    let age = cycle / 300.0;
    let mut r0 = 1.2 * (1.0 + 0.03 * age);
    let mut rf = 0.6 * (1.0 + 0.05 * age);
    let rct = 2.5 * soc_factor * (1.0 + 0.08 * age);
    let wd_r = 1.8 * (1.0 + 0.6 * (1.0 - s));
    let mut shunt = None;
    match cell {
        "Z2" if cycle > 150.0 => r0 *= 1.0 + 0.7 * (cycle - 150.0) / 150.0,
        "Z3" if cycle > 100.0 => rf *= 1.0 + 3.0 * (cycle - 100.0) / 200.0,
        "Z4" if cycle >= 250.0 => shunt = Some(1.5),
        _ => {}
    }
    // Small cell-to-cell spread.
    let spread = match cell {
        "Z1" => 1.0,
        "Z2" => 1.04,
        "Z3" => 0.97,
        "Z4" => 1.02,
        _ => 0.99,
    };
    (
        [
            2.0e-7,
            r0 * spread,
            rf * spread,
            4.0e-5,
            0.9,
            rct * spread,
            wd_r,
            4.0,
            3.0e-3,
            0.88,
        ],
        shunt,
    )
}

/// The cells, cycles and SOC levels of the campaign.
pub(crate) const CELLS: [&str; 5] = ["Z1", "Z2", "Z3", "Z4", "Z5"];
/// SOC levels, %.
pub(crate) const SOCS: [f64; 3] = [20.0, 50.0, 80.0];

/// Cycles at which spectra are taken.
pub fn cycles() -> Vec<f64> {
    (0..=12).map(|k| 25.0 * k as f64).collect()
}

/// Frequencies of every spectrum: 20 kHz to 20 mHz, 8 per decade.
pub(crate) fn frequencies() -> Vec<f64> {
    log_frequencies(2e4, 2e-2, 8)
}

/// Simulates one spectrum; `drift` makes Rct rise by that fraction over the sweep time.
pub(crate) fn spectrum(
    cell: &str,
    cycle: f64,
    soc: f64,
    seed: u64,
    drift: f64,
) -> (Vec<f64>, Vec<Complex64>) {
    let (p, shunt) = cell_state(cell, cycle, soc);
    let freqs = frequencies();
    let model = match shunt {
        Some(_) => "L0 + R0 + (Rf|Qf + (Rct + Wtd)|Qdl)|Rsh",
        None => "L0 + R0 + Rf|Qf + (Rct + Wtd)|Qdl",
    };
    let plan = Plan::compile(&parse(model).expect("valid demo model"));
    let mut params = p.to_vec();
    if let Some(r) = shunt {
        params.push(r);
    }
    // Time spent so far in the sweep at each point: two periods or 0.2 s, whichever is longer.
    let mut t = 0.0;
    let times: Vec<f64> = freqs
        .iter()
        .map(|&f| {
            t += (2.0 / f).max(0.2);
            t
        })
        .collect();
    let total = t;
    let mut z: Vec<Complex64> = freqs
        .iter()
        .zip(&times)
        .map(|(&f, &ti)| {
            let mut q = params.clone();
            q[5] *= 1.0 + drift * ti / total;
            plan.impedance(&q, angular(f))
        })
        .collect();
    add_noise(
        &mut z,
        Noise {
            relative: 0.002,
            seed,
        },
    );
    (freqs, z)
}

/// Latin-1 bytes of a string whose characters are all below U+0100.
fn latin1(s: &str) -> Vec<u8> {
    s.chars()
        .map(|c| if (c as u32) < 256 { c as u8 } else { b'?' })
        .collect()
}

/// Writes one spectrum in the export shape of its cell.
fn export(cell: &str, cycle: f64, soc: f64, f: &[f64], z: &[Complex64]) -> Vec<u8> {
    let mut s = String::new();
    match cell {
        // Semicolons, decimal commas, a preamble, −Z″.
        "Z1" => {
            s.push_str(&format!(
                "Laboratory impedance export\r\nCell;{cell}\r\nCycle;{cycle}\r\nSOC;{soc} %\r\n\r\nFreq/Hz;Re(Z)/Ohm;-Im(Z)/Ohm\r\n"
            ));
            for (fi, zi) in f.iter().zip(z) {
                s.push_str(&format!("{fi:.6e};{:.8e};{:.8e}\r\n", zi.re, -zi.im).replace('.', ","));
            }
            s.into_bytes()
        }
        // Tab separated, kHz and mΩ.
        "Z2" => {
            s.push_str("frequency [kHz]\tZ' [mOhm]\tZ'' [mOhm]\n");
            for (fi, zi) in f.iter().zip(z) {
                s.push_str(&format!(
                    "{:.9e}\t{:.9e}\t{:.9e}\n",
                    fi / 1e3,
                    zi.re * 1e3,
                    zi.im * 1e3
                ));
            }
            s.into_bytes()
        }
        // |Z| and phase in degrees, Latin-1 text with a degree sign.
        "Z3" => {
            s.push_str("# exported spectrum\nFrequency (Hz),|Z| (Ohm),Phase (\u{b0})\n");
            for (fi, zi) in f.iter().zip(z) {
                s.push_str(&format!(
                    "{fi:.8e},{:.9e},{:.9e}\n",
                    zi.norm(),
                    zi.arg().to_degrees()
                ));
            }
            latin1(&s)
        }
        // Runs of spaces, no header.
        "Z4" => {
            for (fi, zi) in f.iter().zip(z) {
                s.push_str(&format!(
                    "  {fi:>16.8e}   {:>18.10e}   {:>18.10e}\n",
                    zi.re, zi.im
                ));
            }
            s.into_bytes()
        }
        // Comma CSV with a UTF-8 byte-order mark and Zre/Zim headers.
        _ => {
            s.push('\u{feff}');
            s.push_str("Freq,Zre,Zim\n");
            for (fi, zi) in f.iter().zip(z) {
                s.push_str(&format!("{fi},{},{}\n", zi.re, zi.im));
            }
            s.into_bytes()
        }
    }
}

/// Every file of the campaign, in a stable order.
pub fn files() -> Vec<DemoFile> {
    let mut out = Vec::new();
    let mut seed = 1000;
    for cell in CELLS {
        for cycle in cycles() {
            for soc in SOCS {
                seed += 1;
                let name = format!("{cell}_c{:03}_soc{}.csv", cycle as u32, soc as u32);
                if name == CORRUPT_FILE {
                    // A file cut short by a full disk, with a garbled line.
                    out.push(DemoFile {
                        name,
                        bytes: b"Freq,Zre,Zim\n1000,1.9,-0.2\n100,2.4,#VALUE!\n10,3.1".to_vec(),
                    });
                    continue;
                }
                let drift = if cell == "Z1" && cycle == 200.0 && soc == 50.0 {
                    0.4
                } else {
                    0.0
                };
                let (f, z) = spectrum(cell, cycle, soc, seed, drift);
                out.push(DemoFile {
                    name,
                    bytes: export(cell, cycle, soc, &f, &z),
                });
            }
        }
    }
    out
}
