//! Page layout shared by every plot: title on top, panels (axes boxes with ticks, grid and titles),
//! a legend strip below the panels and an optional colour bar on the right. Legends and colour bars
//! sit outside the axes boxes so they never hide data; annotation labels are placed where they cover
//! no data point.

use super::axis::{self, Axis, Range, Tick, Unit};
use super::colormap::{self, Rgb};
use super::scene::{GRID, HAlign, INK, MUTED, Paint, Scene, Shape, VAlign, measure};

/// Font sizes and spacing, scaled with the picture size.
#[derive(Debug, Clone, Copy)]
pub struct Sizes {
    /// Plot title.
    pub title: f64,
    /// Axis titles.
    pub label: f64,
    /// Tick labels.
    pub tick: f64,
    /// Legend and colour-bar text.
    pub legend: f64,
    /// Annotations.
    pub note: f64,
    /// Outer margin.
    pub pad: f64,
    /// Marker radius.
    pub marker: f64,
    /// Line width.
    pub line: f64,
}

impl Sizes {
    /// Sizes for a picture of `width` × `height` pixels (tuned at 900 × 650). They follow the
    /// picture's area, so a tall narrow picture keeps readable text.
    pub fn for_page(width: f64, height: f64) -> Sizes {
        let k = ((width * height) / (900.0 * 650.0)).sqrt().clamp(0.75, 4.0);
        Sizes {
            title: 22.0 * k,
            label: 18.0 * k,
            tick: 16.0 * k,
            legend: 16.0 * k,
            note: 15.0 * k,
            pad: 14.0 * k,
            marker: 3.6 * k,
            line: (2.0 * k).max(1.0),
        }
    }
}

/// A rectangle in pixels.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Rect {
    /// Left.
    pub x0: f64,
    /// Top.
    pub y0: f64,
    /// Right.
    pub x1: f64,
    /// Bottom.
    pub y1: f64,
}

impl Rect {
    /// Width.
    pub fn w(&self) -> f64 {
        self.x1 - self.x0
    }
    /// Height.
    pub fn h(&self) -> f64 {
        self.y1 - self.y0
    }
    fn overlaps(&self, o: &Rect) -> bool {
        self.x0 < o.x1 && o.x0 < self.x1 && self.y0 < o.y1 && o.y0 < self.y1
    }
    fn contains(&self, (x, y): (f64, f64)) -> bool {
        x >= self.x0 && x <= self.x1 && y >= self.y0 && y <= self.y1
    }
    fn inside(&self, o: &Rect) -> bool {
        self.x0 >= o.x0 && self.x1 <= o.x1 && self.y0 >= o.y0 && self.y1 <= o.y1
    }
}

/// What an axis will show, before ticks are chosen.
#[derive(Debug, Clone)]
pub struct AxisSpec {
    /// Range in data units (already padded).
    pub range: Range,
    /// Logarithmic.
    pub log: bool,
    /// Quantity name for the title (`Z′`).
    pub quantity: String,
    /// Displayed unit.
    pub unit: Unit,
    /// Only whole-number ticks (counts such as cycle numbers).
    pub integer: bool,
}

impl AxisSpec {
    /// A linear axis over `range` with an SI-prefixed `unit`.
    pub fn linear(range: Range, quantity: &str, unit: &str) -> AxisSpec {
        let max_abs = range.lo.abs().max(range.hi.abs());
        AxisSpec {
            range,
            log: false,
            quantity: quantity.to_owned(),
            unit: axis::si_unit(max_abs, unit),
            integer: false,
        }
    }

    /// A logarithmic axis; with `prefixed` the unit takes an SI prefix for the largest value,
    /// otherwise tick labels are powers of ten of the plain unit (frequency, τ).
    pub fn log(range: Range, quantity: &str, unit: &str, prefixed: bool) -> AxisSpec {
        let max_abs = if prefixed { range.hi } else { 0.0 };
        AxisSpec {
            range,
            log: true,
            quantity: quantity.to_owned(),
            unit: axis::si_unit(max_abs, unit),
            integer: false,
        }
    }

    /// Ticks for a length of `px` pixels: as many as fit without labels touching.
    fn build(&self, px: f64, horizontal: bool, s: &Sizes) -> Axis {
        let gap = s.tick * 0.9;
        let max_start = ((px / (s.tick * 2.2)).floor() as usize).clamp(2, 14);
        let mut chosen = None;
        for n in (2..=max_start).rev() {
            let (mut ticks, minor) = if self.log {
                let k = self.unit.scale;
                let shown = Range {
                    lo: self.range.lo / k,
                    hi: self.range.hi / k,
                };
                let (mut t, mut m) = axis::log_ticks(shown, n);
                t.iter_mut().for_each(|t| t.value *= k);
                m.iter_mut().for_each(|v| *v *= k);
                (t, m)
            } else {
                (axis::linear_ticks(self.range, &self.unit, n), Vec::new())
            };
            if self.integer {
                ticks.retain(|t| (t.value - t.value.round()).abs() < 1e-9);
                for t in &mut ticks {
                    t.label = axis::format_tick(t.value / self.unit.scale, 0);
                }
            }
            let axis = Axis {
                range: self.range,
                log: self.log,
                ticks,
                minor,
                title: axis::title(&self.quantity, &self.unit),
            };
            let fits = axis.ticks.windows(2).all(|w| {
                let d = (axis.frac(w[1].value) - axis.frac(w[0].value)).abs() * px;
                let need = if horizontal {
                    let (a, _) = measure(&w[0].label, s.tick);
                    let (b, _) = measure(&w[1].label, s.tick);
                    (a + b) / 2.0 + gap
                } else {
                    s.tick * 1.7
                };
                d >= need
            });
            if fits || n == 2 {
                chosen = Some(axis);
                if fits {
                    break;
                }
            }
        }
        chosen.expect("n = 2 is always taken")
    }
}

/// An axes box with its two axes.
#[derive(Debug, Clone)]
pub struct Panel {
    /// The plotting rectangle.
    pub rect: Rect,
    /// Horizontal axis.
    pub x: Axis,
    /// Vertical axis.
    pub y: Axis,
    /// Whether the x tick labels and title are drawn.
    pub x_labels: bool,
}

impl Panel {
    /// Pixel x of data value `v`.
    pub fn px(&self, v: f64) -> f64 {
        self.rect.x0 + self.x.frac(v) * self.rect.w()
    }
    /// Pixel y of data value `v`.
    pub fn py(&self, v: f64) -> f64 {
        self.rect.y1 - self.y.frac(v) * self.rect.h()
    }
    /// Pixel position of a data point (non-finite when it cannot be shown).
    pub fn pt(&self, x: f64, y: f64) -> (f64, f64) {
        let ok_x = if self.x.log {
            axis::usable_log(x)
        } else {
            axis::usable(x)
        };
        let ok_y = if self.y.log {
            axis::usable_log(y)
        } else {
            axis::usable(y)
        };
        if ok_x && ok_y {
            (self.px(x), self.py(y))
        } else {
            (f64::NAN, f64::NAN)
        }
    }
}

/// Room taken below a panel by its x tick labels and title.
fn below(s: &Sizes, x_labels: bool) -> f64 {
    if x_labels {
        s.tick * 0.4 + 6.0 + s.tick + s.label * 0.6 + s.label
    } else {
        s.tick * 0.5
    }
}

/// Places a panel inside `region` (which includes room for its tick labels and titles).
/// `min_left` reserves at least that much for the y labels. Returns the panel and the left room used.
pub fn place_panel(
    region: Rect,
    xs: &AxisSpec,
    ys: &AxisSpec,
    x_labels: bool,
    min_left: f64,
    s: &Sizes,
) -> (Panel, f64) {
    let y0 = region.y0 + s.tick * 0.6;
    let y1 = (region.y1 - below(s, x_labels)).max(y0 + 10.0);
    let y = ys.build(y1 - y0, false, s);
    let widest = y
        .ticks
        .iter()
        .map(|t| measure(&t.label, s.tick).0)
        .fold(0.0, f64::max);
    let left = (s.label * 1.2 + s.tick * 0.5 + widest + 6.0 + 4.0).max(min_left);
    let x0 = region.x0 + left;
    let x1 = (region.x1 - s.tick * 1.5).max(x0 + 10.0);
    let x = xs.build(x1 - x0, true, s);
    let rect = Rect {
        x0: x0.round(),
        y0: y0.round(),
        x1: x1.round(),
        y1: y1.round(),
    };
    (
        Panel {
            rect,
            x,
            y,
            x_labels,
        },
        left,
    )
}

/// Rebuilds the ticks of a placed panel for new ranges, keeping its geometry.
pub fn refit_panel(panel: &Panel, xs: &AxisSpec, ys: &AxisSpec, s: &Sizes) -> Panel {
    Panel {
        rect: panel.rect,
        x: xs.build(panel.rect.w(), true, s),
        y: ys.build(panel.rect.h(), false, s),
        x_labels: panel.x_labels,
    }
}

/// Draws grid lines (under the data).
pub fn draw_grid(sc: &mut Scene, p: &Panel) {
    let r = p.rect;
    for t in &p.x.ticks {
        let x = p.px(t.value);
        sc.line((x, r.y0), (x, r.y1), GRID, 1.0);
    }
    for t in &p.y.ticks {
        let y = p.py(t.value);
        sc.line((r.x0, y), (r.x1, y), GRID, 1.0);
    }
}

/// Draws the axes box, ticks, tick labels and axis titles (over the data).
pub fn draw_axes(sc: &mut Scene, p: &Panel, s: &Sizes) {
    let r = p.rect;
    let major = s.tick * 0.4;
    let minor = major * 0.55;
    sc.rect((r.x0, r.y0), (r.x1, r.y1), INK, false);
    let in_x = |v: f64| (0.0..=1.0).contains(&p.x.frac(v));
    let in_y = |v: f64| (0.0..=1.0).contains(&p.y.frac(v));
    for t in p.x.ticks.iter().filter(|t| in_x(t.value)) {
        let x = p.px(t.value);
        sc.line((x, r.y1), (x, r.y1 + major), INK, 1.0);
        if p.x_labels {
            sc.text(
                t.label.clone(),
                (x, r.y1 + major + 4.0),
                s.tick,
                INK,
                HAlign::Center,
                VAlign::Top,
                false,
            );
        }
    }
    for &v in p.x.minor.iter().filter(|&&v| in_x(v)) {
        let x = p.px(v);
        sc.line((x, r.y1), (x, r.y1 + minor), INK, 1.0);
    }
    for t in p.y.ticks.iter().filter(|t| in_y(t.value)) {
        let y = p.py(t.value);
        sc.line((r.x0 - major, y), (r.x0, y), INK, 1.0);
        sc.text(
            t.label.clone(),
            (r.x0 - major - 4.0, y),
            s.tick,
            INK,
            HAlign::Right,
            VAlign::Middle,
            false,
        );
    }
    for &v in p.y.minor.iter().filter(|&&v| in_y(v)) {
        let y = p.py(v);
        sc.line((r.x0 - minor, y), (r.x0, y), INK, 1.0);
    }
    if p.x_labels {
        sc.text(
            p.x.title.clone(),
            (
                (r.x0 + r.x1) / 2.0,
                r.y1 + major + 4.0 + s.tick + s.label * 0.6,
            ),
            s.label,
            INK,
            HAlign::Center,
            VAlign::Top,
            false,
        );
    }
    let widest =
        p.y.ticks
            .iter()
            .map(|t| measure(&t.label, s.tick).0)
            .fold(0.0, f64::max);
    sc.text(
        p.y.title.clone(),
        (
            r.x0 - major - 4.0 - widest - s.tick * 0.5 - s.label * 0.6,
            (r.y0 + r.y1) / 2.0,
        ),
        s.label,
        INK,
        HAlign::Center,
        VAlign::Middle,
        true,
    );
}

/// A "no data" note in the middle of a panel.
pub fn draw_no_data(sc: &mut Scene, p: &Panel, s: &Sizes, what: &str) {
    sc.text(
        what.to_owned(),
        ((p.rect.x0 + p.rect.x1) / 2.0, (p.rect.y0 + p.rect.y1) / 2.0),
        s.note,
        MUTED,
        HAlign::Center,
        VAlign::Middle,
        false,
    );
}

/// How a legend entry is drawn.
#[derive(Debug, Clone, Copy)]
pub enum Sample {
    /// A marker.
    Marker(Shape, Rgb),
    /// A line.
    Line(Rgb),
    /// A line with a marker on it.
    MarkerLine(Shape, Rgb),
    /// A shaded band.
    Band(Paint),
    /// An error bar with a marker.
    ErrorBar(Shape, Rgb),
}

/// One legend entry.
#[derive(Debug, Clone)]
pub struct Entry {
    /// Sample.
    pub sample: Sample,
    /// Text.
    pub label: String,
}

fn entry_width(e: &Entry, s: &Sizes) -> f64 {
    s.legend * 2.2 + 6.0 + measure(&e.label, s.legend).0
}

/// Rows of the legend laid out in `width` pixels.
fn legend_rows(entries: &[Entry], width: f64, s: &Sizes) -> Vec<Vec<usize>> {
    let gap = s.legend * 1.4;
    let mut rows: Vec<Vec<usize>> = Vec::new();
    let mut used = 0.0;
    for (i, e) in entries.iter().enumerate() {
        let w = entry_width(e, s);
        match rows.last_mut() {
            Some(row) if used + gap + w <= width => {
                row.push(i);
                used += gap + w;
            }
            _ => {
                rows.push(vec![i]);
                used = w;
            }
        }
    }
    rows
}

/// Height of the legend strip for `entries` in `width` pixels.
pub fn legend_height(entries: &[Entry], width: f64, s: &Sizes) -> f64 {
    if entries.is_empty() {
        return 0.0;
    }
    legend_rows(entries, width, s).len() as f64 * s.legend * 1.5 + s.legend * 0.5
}

/// Draws the legend strip in `area`, rows centred.
pub fn draw_legend(sc: &mut Scene, entries: &[Entry], area: Rect, s: &Sizes) {
    let gap = s.legend * 1.4;
    let row_h = s.legend * 1.5;
    for (r, row) in legend_rows(entries, area.w(), s).iter().enumerate() {
        let total: f64 = row
            .iter()
            .map(|&i| entry_width(&entries[i], s))
            .sum::<f64>()
            + gap * (row.len() as f64 - 1.0);
        let mut x = area.x0 + (area.w() - total).max(0.0) / 2.0;
        let y = area.y0 + s.legend * 0.5 + row_h * (r as f64 + 0.5);
        for &i in row {
            let e = &entries[i];
            let sw = s.legend * 2.2;
            let mid = (x + sw / 2.0, y);
            match e.sample {
                Sample::Marker(shape, c) => sc.marker(shape, mid, s.marker * 1.2, c),
                Sample::Line(c) => sc.line((x, y), (x + sw, y), c, s.line),
                Sample::MarkerLine(shape, c) => {
                    sc.line((x, y), (x + sw, y), c, s.line * 0.75);
                    sc.marker(shape, mid, s.marker * 1.2, c);
                }
                Sample::Band(p) => sc.rect(
                    (x, y - s.legend * 0.4),
                    (x + sw, y + s.legend * 0.4),
                    p,
                    true,
                ),
                Sample::ErrorBar(shape, c) => {
                    let h = s.legend * 0.5;
                    sc.line((mid.0, y - h), (mid.0, y + h), c, 1.2);
                    sc.line((mid.0 - 4.0, y - h), (mid.0 + 4.0, y - h), c, 1.2);
                    sc.line((mid.0 - 4.0, y + h), (mid.0 + 4.0, y + h), c, 1.2);
                    sc.marker(shape, mid, s.marker * 1.2, c);
                }
            }
            sc.text(
                e.label.clone(),
                (x + sw + 6.0, y),
                s.legend,
                INK,
                HAlign::Left,
                VAlign::Middle,
                false,
            );
            x += entry_width(e, s) + gap;
        }
    }
}

/// A colour bar: the sequential map over a value range.
#[derive(Debug, Clone)]
pub struct ColorBar {
    /// Title (`SOC / %`).
    pub label: String,
    /// Value at the bottom and top of the bar.
    pub range: Range,
    /// Whole-number ticks only.
    pub integer: bool,
}

impl ColorBar {
    /// Position 0..=1 of `v` on the bar.
    pub fn frac(&self, v: f64) -> f64 {
        let span = self.range.span();
        if span > 0.0 {
            ((v - self.range.lo) / span).clamp(0.0, 1.0)
        } else {
            0.5
        }
    }

    fn ticks(&self, px: f64, s: &Sizes) -> Vec<Tick> {
        let spec = AxisSpec {
            range: self.range,
            log: false,
            quantity: String::new(),
            unit: axis::si_unit(0.0, ""),
            integer: self.integer,
        };
        spec.build(px, false, s).ticks
    }

    /// Width the bar needs with its labels.
    pub fn width(&self, px: f64, s: &Sizes) -> f64 {
        let widest = self
            .ticks(px, s)
            .iter()
            .map(|t| measure(&t.label, s.legend).0)
            .fold(0.0, f64::max);
        s.legend * 1.2 + s.legend * 1.1 + 6.0 + widest + s.legend * 0.8 + s.legend * 1.2
    }

    /// Draws the bar beside `panel`, starting at `x`.
    pub fn draw(&self, sc: &mut Scene, x: f64, panel: &Rect, s: &Sizes) {
        let bx0 = x + s.legend * 1.2;
        let bx1 = bx0 + s.legend * 1.1;
        let (top, bottom) = (panel.y0, panel.y1);
        let steps = ((bottom - top) / 2.0).ceil().max(1.0) as usize;
        for k in 0..steps {
            let ya = bottom - (bottom - top) * k as f64 / steps as f64;
            let yb = bottom - (bottom - top) * (k + 1) as f64 / steps as f64;
            let c = colormap::sequential((k as f64 + 0.5) / steps as f64);
            sc.rect((bx0, yb.floor()), (bx1, ya.ceil()), c, true);
        }
        sc.rect((bx0, top), (bx1, bottom), INK, false);
        let ticks = self.ticks(bottom - top, s);
        let mut widest: f64 = 0.0;
        for t in &ticks {
            let y = bottom - self.frac(t.value) * (bottom - top);
            sc.line((bx1, y), (bx1 + 5.0, y), INK, 1.0);
            sc.text(
                t.label.clone(),
                (bx1 + 8.0, y),
                s.legend,
                INK,
                HAlign::Left,
                VAlign::Middle,
                false,
            );
            widest = widest.max(measure(&t.label, s.legend).0);
        }
        sc.text(
            self.label.clone(),
            (
                bx1 + 8.0 + widest + s.legend * 0.8 + s.legend * 0.5,
                (top + bottom) / 2.0,
            ),
            s.legend,
            INK,
            HAlign::Center,
            VAlign::Middle,
            true,
        );
    }
}

/// The regions of a page.
#[derive(Debug, Clone, Copy)]
pub struct Page {
    /// Where panels go (including their tick labels and axis titles).
    pub body: Rect,
    /// The legend strip (zero height without a legend).
    pub legend: Rect,
    /// Left edge of the colour bar, if any.
    pub colorbar_x: Option<f64>,
}

/// Lays out a page: title, body, legend, colour bar; draws the title.
pub fn page(
    sc: &mut Scene,
    title: &str,
    entries: &[Entry],
    colorbar: Option<&ColorBar>,
    s: &Sizes,
) -> Page {
    let (w, h) = (sc.width, sc.height);
    let mut top = s.pad;
    if !title.is_empty() {
        sc.text(
            title.to_owned(),
            (w / 2.0, s.pad),
            s.title,
            INK,
            HAlign::Center,
            VAlign::Top,
            false,
        );
        top += s.title * 1.35;
    }
    let inner_w = w - 2.0 * s.pad;
    let lh = legend_height(entries, inner_w, s).min(h * 0.35);
    let bar_w = colorbar.map_or(0.0, |c| c.width(h - top - lh - 2.0 * s.pad, s));
    let body = Rect {
        x0: s.pad,
        y0: top,
        x1: w - s.pad - bar_w,
        y1: h - s.pad - lh,
    };
    Page {
        body,
        legend: Rect {
            x0: s.pad,
            y0: body.y1,
            x1: w - s.pad,
            y1: h - s.pad,
        },
        colorbar_x: colorbar.map(|_| body.x1),
    }
}

/// Places annotation labels near their points without covering data points, other labels or the
/// panel edge; draws each with a marker ring and a leader line when moved away.
pub fn draw_annotations(
    sc: &mut Scene,
    panel: &Panel,
    notes: &[((f64, f64), String)],
    obstacles: &[(f64, f64)],
    s: &Sizes,
) {
    let mut taken: Vec<Rect> = Vec::new();
    for (anchor, text) in notes {
        if !anchor.0.is_finite() || !anchor.1.is_finite() {
            continue;
        }
        let (tw, th) = measure(text, s.note);
        let (tw, th) = (tw + 4.0, th + 4.0);
        let d = s.marker * 2.5 + 4.0;
        let candidates = [
            (0.0, -d - th / 2.0),
            (d + tw / 2.0, -d - th / 2.0),
            (-d - tw / 2.0, -d - th / 2.0),
            (d + tw / 2.0, 0.0),
            (-d - tw / 2.0, 0.0),
            (0.0, -2.5 * d - th / 2.0),
            (0.0, d + th / 2.0),
            (d + tw / 2.0, d + th / 2.0),
            (-d - tw / 2.0, d + th / 2.0),
            (0.0, -4.0 * d - th / 2.0),
            (2.5 * d + tw / 2.0, -2.5 * d - th / 2.0),
            (-2.5 * d - tw / 2.0, -2.5 * d - th / 2.0),
        ];
        let mut best: Option<(usize, (f64, f64), Rect)> = None;
        for (dx, dy) in candidates {
            let c = (anchor.0 + dx, anchor.1 + dy);
            let r = Rect {
                x0: c.0 - tw / 2.0,
                y0: c.1 - th / 2.0,
                x1: c.0 + tw / 2.0,
                y1: c.1 + th / 2.0,
            };
            if !r.inside(&panel.rect) {
                continue;
            }
            let pad = Rect {
                x0: r.x0 - s.marker,
                y0: r.y0 - s.marker,
                x1: r.x1 + s.marker,
                y1: r.y1 + s.marker,
            };
            let hits = obstacles.iter().filter(|&&o| pad.contains(o)).count()
                + 1000 * taken.iter().filter(|t| t.overlaps(&r)).count();
            if best.as_ref().is_none_or(|b| hits < b.0) {
                best = Some((hits, c, r));
            }
            if hits == 0 {
                break;
            }
        }
        let Some((_, c, r)) = best else { continue };
        sc.marker(Shape::Ring, *anchor, s.marker * 1.9, INK);
        let dist = ((c.0 - anchor.0).powi(2) + (c.1 - anchor.1).powi(2)).sqrt();
        if dist > d * 1.8 {
            // Leader from the ring to the nearest point of the label box.
            let to = (anchor.0.clamp(r.x0, r.x1), anchor.1.clamp(r.y0, r.y1));
            sc.line(*anchor, to, MUTED, 1.0);
        }
        sc.text(
            text.clone(),
            c,
            s.note,
            INK,
            HAlign::Center,
            VAlign::Middle,
            false,
        );
        taken.push(r);
    }
}
