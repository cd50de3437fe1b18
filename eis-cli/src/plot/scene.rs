//! A backend-independent list of drawing primitives in pixel coordinates, painted onto a plotters
//! backend at the end. Layout code computes geometry once; SVG and PNG paint the same scene.

use super::PlotError;
use super::colormap::Rgb;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};
use plotters::style::{FontDesc, FontFamily, FontStyle, FontTransform};
use std::sync::OnceLock;

/// The embedded font (DejaVu Sans; licence in `eis-cli/assets/DejaVuSans-LICENSE.txt`).
const FONT: &[u8] = include_bytes!("../../assets/DejaVuSans.ttf");

/// The font family written into SVG text: the embedded face first, the generic family as fallback.
pub const FAMILY: &str = "DejaVu Sans, sans-serif";

/// Registers the embedded font with plotters once; every text measurement and PNG needs it.
pub fn ensure_font() -> Result<(), PlotError> {
    static DONE: OnceLock<bool> = OnceLock::new();
    let ok = *DONE
        .get_or_init(|| plotters::style::register_font(FAMILY, FontStyle::Normal, FONT).is_ok());
    if ok { Ok(()) } else { Err(PlotError::Font) }
}

fn font(size: f64) -> FontDesc<'static> {
    FontDesc::new(FontFamily::Name(FAMILY), size, FontStyle::Normal)
}

/// Width and height in pixels of `text` at font size `size`.
pub fn measure(text: &str, size: f64) -> (f64, f64) {
    if text.is_empty() {
        return (0.0, size / 1.24);
    }
    match font(size).box_size(text) {
        Ok((w, h)) => (w as f64, h as f64),
        // Without the font (it failed to register): a generous estimate.
        Err(_) => (0.6 * size * text.chars().count() as f64, size / 1.24),
    }
}

/// Horizontal anchor of a text.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum HAlign {
    /// Text starts at the point.
    Left,
    /// Text is centred on the point.
    Center,
    /// Text ends at the point.
    Right,
}

/// Vertical anchor of a text.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum VAlign {
    /// Text hangs below the point.
    Top,
    /// Text is centred on the point.
    Middle,
}

/// A colour with opacity.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Paint {
    /// The colour.
    pub rgb: Rgb,
    /// Opacity 0..=1.
    pub alpha: f64,
}

impl From<Rgb> for Paint {
    fn from(rgb: Rgb) -> Paint {
        Paint { rgb, alpha: 1.0 }
    }
}

impl Paint {
    /// The same colour at opacity `alpha`.
    pub fn with_alpha(rgb: Rgb, alpha: f64) -> Paint {
        Paint { rgb, alpha }
    }
}

/// Black text and axes.
pub const INK: Rgb = Rgb(0x1a, 0x1a, 0x1a);
/// Grid lines.
pub const GRID: Rgb = Rgb(0xe3, 0xe3, 0xe3);
/// Secondary text.
pub const MUTED: Rgb = Rgb(0x55, 0x55, 0x55);

/// One drawing primitive in pixel coordinates (y down).
#[derive(Debug, Clone)]
pub enum Prim {
    /// A polyline.
    Path {
        /// Vertices.
        pts: Vec<(f64, f64)>,
        /// Colour.
        paint: Paint,
        /// Line width in pixels.
        width: f64,
    },
    /// A circle (a marker).
    Circle {
        /// Centre.
        c: (f64, f64),
        /// Radius.
        r: f64,
        /// Colour.
        paint: Paint,
        /// Filled or outlined.
        fill: bool,
        /// Outline width.
        width: f64,
    },
    /// A filled polygon.
    Polygon {
        /// Vertices.
        pts: Vec<(f64, f64)>,
        /// Colour.
        paint: Paint,
    },
    /// An axis-aligned rectangle.
    Rect {
        /// One corner.
        a: (f64, f64),
        /// The opposite corner.
        b: (f64, f64),
        /// Colour.
        paint: Paint,
        /// Filled or outlined.
        fill: bool,
    },
    /// A text.
    Text {
        /// The text.
        text: String,
        /// Anchor point.
        at: (f64, f64),
        /// Font size.
        size: f64,
        /// Colour.
        paint: Paint,
        /// Horizontal anchor.
        h: HAlign,
        /// Vertical anchor.
        v: VAlign,
        /// Rotated to read bottom to top.
        vertical: bool,
    },
}

/// A picture: its size and primitives in painting order.
#[derive(Debug, Clone, Default)]
pub struct Scene {
    /// Width in pixels.
    pub width: f64,
    /// Height in pixels.
    pub height: f64,
    /// Primitives, painted first to last.
    pub prims: Vec<Prim>,
}

impl Scene {
    /// An empty scene.
    pub fn new(width: f64, height: f64) -> Scene {
        Scene {
            width,
            height,
            prims: Vec::new(),
        }
    }

    /// Adds a polyline, skipping non-finite vertices (which split the line).
    pub fn path(&mut self, pts: &[(f64, f64)], paint: impl Into<Paint>, width: f64) {
        let paint = paint.into();
        for run in pts.split(|p| !p.0.is_finite() || !p.1.is_finite()) {
            if run.len() >= 2 {
                self.prims.push(Prim::Path {
                    pts: run.to_vec(),
                    paint,
                    width,
                });
            }
        }
    }

    /// Adds a straight line.
    pub fn line(&mut self, a: (f64, f64), b: (f64, f64), paint: impl Into<Paint>, width: f64) {
        self.path(&[a, b], paint, width);
    }

    /// Adds a text.
    #[allow(clippy::too_many_arguments)]
    pub fn text(
        &mut self,
        text: impl Into<String>,
        at: (f64, f64),
        size: f64,
        paint: impl Into<Paint>,
        h: HAlign,
        v: VAlign,
        vertical: bool,
    ) {
        self.prims.push(Prim::Text {
            text: text.into(),
            at,
            size,
            paint: paint.into(),
            h,
            v,
            vertical,
        });
    }

    /// Adds a rectangle.
    pub fn rect(&mut self, a: (f64, f64), b: (f64, f64), paint: impl Into<Paint>, fill: bool) {
        self.prims.push(Prim::Rect {
            a,
            b,
            paint: paint.into(),
            fill,
        });
    }

    /// Adds a marker of `shape` centred at `c`.
    pub fn marker(&mut self, shape: Shape, c: (f64, f64), r: f64, paint: impl Into<Paint>) {
        let paint = paint.into();
        if !c.0.is_finite() || !c.1.is_finite() {
            return;
        }
        let (x, y) = c;
        match shape {
            Shape::Circle => self.prims.push(Prim::Circle {
                c,
                r,
                paint,
                fill: true,
                width: 1.0,
            }),
            Shape::Ring => self.prims.push(Prim::Circle {
                c,
                r,
                paint,
                fill: false,
                width: 1.5,
            }),
            Shape::Square => {
                let s = r * 0.9;
                self.prims.push(Prim::Polygon {
                    pts: vec![
                        (x - s, y - s),
                        (x + s, y - s),
                        (x + s, y + s),
                        (x - s, y + s),
                    ],
                    paint,
                });
            }
            Shape::Triangle => {
                let s = r * 1.2;
                self.prims.push(Prim::Polygon {
                    pts: vec![
                        (x, y - s),
                        (x + s * 0.87, y + s * 0.5),
                        (x - s * 0.87, y + s * 0.5),
                    ],
                    paint,
                });
            }
            Shape::Diamond => {
                let s = r * 1.25;
                self.prims.push(Prim::Polygon {
                    pts: vec![(x, y - s), (x + s, y), (x, y + s), (x - s, y)],
                    paint,
                });
            }
        }
    }

    /// Paints the scene onto `area`, with every coordinate multiplied by `k` (for supersampling).
    pub fn paint<DB: DrawingBackend>(
        &self,
        area: &DrawingArea<DB, plotters::coord::Shift>,
        k: f64,
    ) -> Result<(), PlotError> {
        let err = |e: DrawingAreaErrorKind<DB::ErrorType>| PlotError::Draw(e.to_string());
        let p = |(x, y): (f64, f64)| ((x * k).round() as i32, (y * k).round() as i32);
        let color = |c: Paint| RGBAColor(c.rgb.0, c.rgb.1, c.rgb.2, c.alpha.clamp(0.0, 1.0));
        area.fill(&WHITE).map_err(err)?;
        for prim in &self.prims {
            match prim {
                Prim::Path { pts, paint, width } => {
                    let style = ShapeStyle {
                        color: color(*paint),
                        filled: false,
                        stroke_width: (width * k).round().max(1.0) as u32,
                    };
                    let pts: Vec<(i32, i32)> = pts.iter().map(|&q| p(q)).collect();
                    area.draw(&PathElement::new(pts, style)).map_err(err)?;
                }
                Prim::Circle {
                    c,
                    r,
                    paint,
                    fill,
                    width,
                } => {
                    let style = ShapeStyle {
                        color: color(*paint),
                        filled: *fill,
                        stroke_width: (width * k).round().max(1.0) as u32,
                    };
                    let r = (r * k).round().max(1.0) as i32;
                    area.draw(&Circle::new(p(*c), r, style)).map_err(err)?;
                }
                Prim::Polygon { pts, paint } => {
                    let pts: Vec<(i32, i32)> = pts.iter().map(|&q| p(q)).collect();
                    area.draw(&Polygon::new(pts, color(*paint).filled()))
                        .map_err(err)?;
                }
                Prim::Rect { a, b, paint, fill } => {
                    let style = ShapeStyle {
                        color: color(*paint),
                        filled: *fill,
                        stroke_width: k.round().max(1.0) as u32,
                    };
                    area.draw(&Rectangle::new([p(*a), p(*b)], style))
                        .map_err(err)?;
                }
                Prim::Text {
                    text,
                    at,
                    size,
                    paint,
                    h,
                    v,
                    vertical,
                } => {
                    let h = match h {
                        HAlign::Left => HPos::Left,
                        HAlign::Center => HPos::Center,
                        HAlign::Right => HPos::Right,
                    };
                    let v = match v {
                        VAlign::Top => VPos::Top,
                        VAlign::Middle => VPos::Center,
                    };
                    let mut f = font(size * k);
                    if *vertical {
                        f = f.transform(FontTransform::Rotate270);
                    }
                    let c = color(*paint);
                    let style = TextStyle::from(f).color(&c).pos(Pos::new(h, v));
                    area.draw(&Text::new(text.clone(), p(*at), style))
                        .map_err(err)?;
                }
            }
        }
        area.present().map_err(err)
    }
}

/// Marker shapes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Shape {
    /// Filled circle.
    Circle,
    /// Open circle.
    Ring,
    /// Filled square.
    Square,
    /// Filled triangle, point up.
    Triangle,
    /// Filled diamond.
    Diamond,
}
