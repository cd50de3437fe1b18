//! `eis inspect`: the canonical form of a circuit and its parameter table.

use crate::io::{Outcome, load_model};
use eis_core::element::Domain;
use eis_core::number::format_si;
use std::process::ExitCode;

/// Show a circuit in canonical form with its parameters (name, unit, initial value, bounds, fixed).
#[derive(clap::Args)]
#[command(
    after_help = "Example:\n  eis inspect --model 'R0 + Rct{50, 1..1k}|Qdl{n=0.9 fixed}'\n  eis inspect --model circuits/randles-transmissive.circ"
)]
pub struct Args {
    /// Circuit file (.circ) or inline expression.
    #[arg(long, short)]
    model: String,
}

/// Runs the command.
pub fn run(args: Args) -> Outcome {
    let c = load_model(&args.model)?;
    let mut out = format!("{}\n\n", eis_core::circuit::print(&c));
    let rows: Vec<[String; 6]> = (0..c.params.len())
        .map(|i| {
            let p = &c.params[i];
            let info = c.info(i);
            let (lo, hi) = c.bounds(i);
            let initial = match p.initial {
                Some(v) => format_si(v),
                None => format!("{} (default)", format_si(c.initial_or_default(i))),
            };
            let bounds = match info.domain {
                Domain::Positive if p.lower.is_none() && p.upper.is_none() => "> 0".to_owned(),
                _ => format!("{}..{}", format_si(lo), format_si(hi)),
            };
            [
                p.name.clone(),
                info.unit.to_owned(),
                initial,
                bounds,
                if p.fixed { "yes" } else { "no" }.to_owned(),
                info.description.to_owned(),
            ]
        })
        .collect();
    let header = ["parameter", "unit", "initial", "bounds", "fixed", "meaning"];
    let mut widths = header.map(str::len);
    for r in &rows {
        for (w, cell) in widths.iter_mut().zip(r) {
            *w = (*w).max(cell.chars().count());
        }
    }
    let line = |cells: &[String]| {
        let mut s = String::new();
        for (k, cell) in cells.iter().enumerate() {
            if k + 1 == cells.len() {
                s.push_str(cell);
            } else {
                s.push_str(&format!("{cell:<w$}  ", w = widths[k]));
            }
        }
        s
    };
    out.push_str(&line(&header.map(String::from)));
    out.push('\n');
    for r in &rows {
        out.push_str(&line(r));
        out.push('\n');
    }
    for (name, role) in &c.roles {
        out.push_str(&format!("role of arc {name}: {}\n", role.as_str()));
    }
    crate::io::print(&out)?;
    Ok(ExitCode::SUCCESS)
}
