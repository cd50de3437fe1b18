//! The targets: the circuit parser, the export reader and the numerics (fit, Kramers–Kronig, DRT).

pub mod circuit;
pub mod numerics;
pub mod reader;

pub use circuit::CircuitTarget;

pub use numerics::NumericsTarget;
pub use reader::ReaderTarget;
