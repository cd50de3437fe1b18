//! Plots for reports: Nyquist, Bode, residuals, DRT, overlays coloured by a metadata value, and
//! trends, rendered to self-contained SVG (text kept as text) or PNG, with an embedded font and no
//! system libraries.
//!
//! Callers fill one of the plain data structs below, wrap it in [`Plot`] and call [`render`]:
//!
//! ```ignore
//! let plot = Plot::Nyquist(NyquistPlot {
//!     title: "Cell A3, 50 % SOC".into(),
//!     series: vec![SeriesData::markers("measured", freq, z)],
//!     annotations: arc_apexes(&freq, &z),
//! });
//! let svg = render(&plot, Format::Svg, 900, 650)?;
//! ```
//!
//! # Conventions
//!
//! - Impedances are in Ω with the imaginary part carrying its own sign (capacitive Z″ < 0); Nyquist
//!   plots show −Z″ upwards with the same Ω per pixel on both axes.
//! - Frequencies in Hz, time constants in s, relative residuals as fractions (0.01 = 1 %), shown in %.
//! - Points that cannot be shown (NaN, infinite, beyond ±1e300, non-positive on a log axis) are left
//!   out; a plot with nothing to show is still drawn, with a note instead of data. Rendering never
//!   panics on odd data.
//! - Legends sit below the axes and colour bars beside them, so neither hides data.

mod axis;
pub mod build;
pub mod colormap;
mod frame;
mod kinds;
mod scene;

use num_complex::Complex64;
use plotters::prelude::*;
use std::fmt;

pub use kinds::{arc_apexes, drt_peaks};

/// Output format.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    /// Scalable vector graphics, UTF-8 text.
    Svg,
    /// Portable network graphics, 8-bit RGB.
    Png,
}

impl Format {
    /// The format a file name asks for by its extension (`.png` → PNG, `.svg` → SVG).
    pub fn from_extension(path: &std::path::Path) -> Option<Format> {
        match path.extension()?.to_str()?.to_ascii_lowercase().as_str() {
            "svg" => Some(Format::Svg),
            "png" => Some(Format::Png),
            _ => None,
        }
    }
}

/// Why a plot could not be rendered.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum PlotError {
    /// The requested picture size is outside 100..=10000 pixels per side.
    Size {
        /// Requested width.
        width: u32,
        /// Requested height.
        height: u32,
    },
    /// The embedded font could not be loaded.
    Font,
    /// The drawing backend failed.
    Draw(String),
    /// PNG encoding failed.
    Encode(String),
}

impl fmt::Display for PlotError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            PlotError::Size { width, height } => write!(
                f,
                "picture size {width}×{height} is outside 100..=10000 pixels per side"
            ),
            PlotError::Font => write!(f, "the embedded font could not be loaded"),
            PlotError::Draw(e) => write!(f, "drawing failed: {e}"),
            PlotError::Encode(e) => write!(f, "png encoding failed: {e}"),
        }
    }
}

impl std::error::Error for PlotError {}

/// How a series is drawn.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Style {
    /// A marker per point (measured data).
    Markers,
    /// A line through the points (a fitted or simulated model).
    Line,
    /// Markers joined by a thin line.
    MarkersAndLine,
}

/// One impedance spectrum to draw.
#[derive(Debug, Clone, PartialEq)]
pub struct SeriesData {
    /// Legend text; empty for no legend entry.
    pub label: String,
    /// Frequencies in Hz, one per impedance.
    pub freq: Vec<f64>,
    /// Impedances in Ω.
    pub z: Vec<Complex64>,
    /// Markers or line.
    pub style: Style,
}

impl SeriesData {
    /// Measured data, drawn as markers.
    pub fn markers(label: impl Into<String>, freq: Vec<f64>, z: Vec<Complex64>) -> SeriesData {
        SeriesData {
            label: label.into(),
            freq,
            z,
            style: Style::Markers,
        }
    }

    /// A model curve, drawn as a line.
    pub fn line(label: impl Into<String>, freq: Vec<f64>, z: Vec<Complex64>) -> SeriesData {
        SeriesData {
            label: label.into(),
            freq,
            z,
            style: Style::Line,
        }
    }
}

/// A labelled point of the Nyquist plane (a characteristic frequency, say).
#[derive(Debug, Clone, PartialEq)]
pub struct Annotation {
    /// The impedance at the point (Ω, true sign of Z″).
    pub z: Complex64,
    /// Text shown beside it.
    pub text: String,
}

/// Z′ against −Z″ with equal scaling.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct NyquistPlot {
    /// Title on top; empty for none.
    pub title: String,
    /// Spectra, drawn in order; series `i` takes palette colour `i`.
    pub series: Vec<SeriesData>,
    /// Labelled points.
    pub annotations: Vec<Annotation>,
}

/// |Z| and phase against log frequency, in two stacked panels.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct BodePlot {
    /// Title on top.
    pub title: String,
    /// Spectra; series `i` takes palette colour `i`.
    pub series: Vec<SeriesData>,
}

/// Relative residuals (data − model) / |model| against log frequency.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct ResidualPlot {
    /// Title on top.
    pub title: String,
    /// Frequencies in Hz.
    pub freq: Vec<f64>,
    /// Real-part residuals as fractions.
    pub re_rel: Vec<f64>,
    /// Imaginary-part residuals as fractions.
    pub im_rel: Vec<f64>,
    /// Half-width of the Kramers–Kronig band as a fraction (0.01 = ±1 %), when known.
    pub band: Option<f64>,
}

/// A peak of a distribution of relaxation times.
#[derive(Debug, Clone, PartialEq)]
pub struct DrtPeak {
    /// Time constant in s.
    pub tau: f64,
    /// γ at the peak in Ω.
    pub gamma: f64,
    /// Text shown; `None` shows `τ = …`.
    pub label: Option<String>,
}

/// γ against log τ.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct DrtPlot {
    /// Title on top.
    pub title: String,
    /// Time constants in s.
    pub tau: Vec<f64>,
    /// γ(ln τ) in Ω at each τ.
    pub gamma: Vec<f64>,
    /// Marked peaks.
    pub peaks: Vec<DrtPeak>,
}

/// One spectrum of an overlay, with the value that picks its colour.
#[derive(Debug, Clone, PartialEq)]
pub struct OverlaySpectrum {
    /// Name (not drawn; for callers and diagnostics).
    pub label: String,
    /// Frequencies in Hz.
    pub freq: Vec<f64>,
    /// Impedances in Ω.
    pub z: Vec<Complex64>,
    /// Colour value (SOC, cycle, ...); NaN draws grey.
    pub value: f64,
}

/// Many Nyquist spectra coloured by a value, with a colour bar.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct OverlayPlot {
    /// Title on top.
    pub title: String,
    /// The spectra.
    pub spectra: Vec<OverlaySpectrum>,
    /// Colour-bar title with unit (`SOC / %`).
    pub colorbar_label: String,
}

/// A point of a trend.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TrendPoint {
    /// Position (cycle, SOC, ...).
    pub x: f64,
    /// Value in the unit of the plot.
    pub y: f64,
    /// Standard error of `y`, drawn as an error bar.
    pub y_err: Option<f64>,
    /// A suspect point, marked in red.
    pub flagged: bool,
}

/// The points of one cell.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct TrendSeries {
    /// Cell name for the legend.
    pub label: String,
    /// Points, any order (drawn sorted by x).
    pub points: Vec<TrendPoint>,
}

/// A quantity against cycle or SOC, one series per cell.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct TrendPlot {
    /// Title on top.
    pub title: String,
    /// One series per cell.
    pub series: Vec<TrendSeries>,
    /// Horizontal quantity (`cycle`, `SOC`).
    pub x_label: String,
    /// Its unit (`%`), empty for counts.
    pub x_unit: String,
    /// Vertical quantity (`Rct`).
    pub y_label: String,
    /// Its SI unit without prefix (`Ω`); the axis picks a prefix.
    pub y_unit: String,
}

/// Any plot.
#[derive(Debug, Clone, PartialEq)]
pub enum Plot {
    /// Nyquist plot.
    Nyquist(NyquistPlot),
    /// Bode plot.
    Bode(BodePlot),
    /// Residuals.
    Residuals(ResidualPlot),
    /// Distribution of relaxation times.
    Drt(DrtPlot),
    /// Coloured overlay of spectra.
    Overlay(OverlayPlot),
    /// Trend over cycles or SOC.
    Trend(TrendPlot),
}

/// Default picture size in pixels.
pub const DEFAULT_SIZE: (u32, u32) = (900, 650);

/// Renders `plot` at `width` × `height` pixels: SVG as UTF-8 bytes, PNG encoded.
///
/// # Errors
///
/// [`PlotError::Size`] for a side outside 100..=10000 pixels; the other kinds when the font, the
/// backend or the encoder fail (not expected in practice). Odd data is never an error.
pub fn render(plot: &Plot, format: Format, width: u32, height: u32) -> Result<Vec<u8>, PlotError> {
    if !(100..=10_000).contains(&width) || !(100..=10_000).contains(&height) {
        return Err(PlotError::Size { width, height });
    }
    scene::ensure_font()?;
    let sc = kinds::scene(plot, width as f64, height as f64);
    match format {
        Format::Svg => {
            let mut out = String::new();
            {
                let area = SVGBackend::with_string(&mut out, (width, height)).into_drawing_area();
                sc.paint(&area, 1.0)?;
            }
            Ok(out.into_bytes())
        }
        Format::Png => {
            // Painted at twice the size and averaged down: smooth lines and text.
            const K: u32 = 2;
            let (w2, h2) = (width * K, height * K);
            let mut big = vec![255u8; (w2 * h2 * 3) as usize];
            {
                let area = BitMapBackend::with_buffer(&mut big, (w2, h2)).into_drawing_area();
                sc.paint(&area, K as f64)?;
            }
            let small = downsample(&big, width as usize, height as usize, K as usize);
            encode_png(&small, width, height)
        }
    }
}

fn downsample(big: &[u8], w: usize, h: usize, k: usize) -> Vec<u8> {
    let mut out = vec![0u8; w * h * 3];
    let row = w * k * 3;
    for y in 0..h {
        for x in 0..w {
            for c in 0..3 {
                let mut sum = 0u32;
                for dy in 0..k {
                    for dx in 0..k {
                        sum += big[(y * k + dy) * row + (x * k + dx) * 3 + c] as u32;
                    }
                }
                out[(y * w + x) * 3 + c] = ((sum + (k * k / 2) as u32) / (k * k) as u32) as u8;
            }
        }
    }
    out
}

fn encode_png(rgb: &[u8], width: u32, height: u32) -> Result<Vec<u8>, PlotError> {
    let e = |e: png::EncodingError| PlotError::Encode(e.to_string());
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, width, height);
        enc.set_color(png::ColorType::Rgb);
        enc.set_depth(png::BitDepth::Eight);
        let mut writer = enc.write_header().map_err(e)?;
        writer.write_image_data(rgb).map_err(e)?;
        writer.finish().map_err(e)?;
    }
    Ok(out)
}

#[cfg(test)]
mod tests;
