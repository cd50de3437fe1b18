//! The plot kinds: from a data struct to a [`Scene`], plus the small analyses the plots annotate
//! (arc apexes, DRT peaks).

use super::axis::{self, Range};
use super::colormap::{self, FLAG, Rgb};
use super::frame::{
    self, AxisSpec, ColorBar, Entry, Panel, Rect, Sample, Sizes, draw_annotations, draw_axes,
    draw_grid, draw_legend, draw_no_data, place_panel, refit_panel,
};
use super::scene::{MUTED, Paint, Scene, Shape};
use super::{
    Annotation, BodePlot, DrtPeak, DrtPlot, NyquistPlot, OverlayPlot, Plot, ResidualPlot,
    SeriesData, Style, TrendPlot,
};
use num_complex::Complex64;

/// The scene of any plot.
pub fn scene(plot: &Plot, width: f64, height: f64) -> Scene {
    let mut sc = Scene::new(width, height);
    let s = Sizes::for_page(width, height);
    match plot {
        Plot::Nyquist(p) => nyquist(&mut sc, p, &s),
        Plot::Bode(p) => bode(&mut sc, p, &s),
        Plot::Residuals(p) => residuals(&mut sc, p, &s),
        Plot::Drt(p) => drt(&mut sc, p, &s),
        Plot::Overlay(p) => overlay(&mut sc, p, &s),
        Plot::Trend(p) => trend(&mut sc, p, &s),
    }
    sc
}

/// Apexes of the arcs of a spectrum (peaks of −Z″ along frequency, by the library's one peak rule,
/// [`eis_core::drt::peak_indices`], at 5 % of the largest −Z″), annotated with their characteristic
/// frequency, e.g. `1.2 kHz`.
pub fn arc_apexes(freq: &[f64], z: &[Complex64]) -> Vec<Annotation> {
    let mut pts: Vec<(f64, Complex64)> = freq
        .iter()
        .zip(z)
        .filter(|(f, z)| axis::usable_log(**f) && axis::usable(z.re) && axis::usable(z.im))
        .map(|(f, z)| (*f, *z))
        .collect();
    pts.sort_by(|a, b| a.0.total_cmp(&b.0));
    let y: Vec<f64> = pts.iter().map(|p| -p.1.im).collect();
    let Some(r) = Range::of(y.iter().copied(), false) else {
        return Vec::new();
    };
    if r.hi <= 0.0 {
        return Vec::new();
    }
    eis_core::drt::peak_indices(&y, 0.05)
        .into_iter()
        .filter(|&i| y[i] > 0.0)
        .map(|i| Annotation {
            z: pts[i].1,
            text: axis::quantity(pts[i].0, "Hz"),
        })
        .collect()
}

/// Peaks of a DRT read back without its peak table: the library's peak finder
/// ([`eis_core::drt::find_peaks`]) at its default threshold, the rule `eis drt` reports by. The
/// measured window is unknown here, so no peak is marked as being at its edge.
pub fn drt_peaks(tau: &[f64], gamma: &[f64]) -> Vec<DrtPeak> {
    eis_core::drt::find_peaks(tau, gamma, eis_core::drt::DEFAULT_PEAK_THRESHOLD, None)
        .into_iter()
        .map(|p| DrtPeak {
            tau: p.tau_s,
            gamma: p.gamma_ohm,
            label: None,
        })
        .collect()
}

/// The drawable (Z′, −Z″) points of a spectrum.
fn nyquist_points(z: &[Complex64]) -> Vec<(f64, f64)> {
    z.iter()
        .map(|z| (z.re, -z.im))
        .filter(|p| axis::usable(p.0) && axis::usable(p.1))
        .collect()
}

/// Widens the ranges so that Ω per pixel is the same on both axes for a `w` × `h` plotting area.
fn equalize(x: Range, y: Range, w: f64, h: f64, grow_up: bool) -> (Range, Range) {
    let k = (x.span() / w).max(y.span() / h);
    if !k.is_finite() || k <= 0.0 {
        return (x, y);
    }
    let mid = 0.5 * (x.lo + x.hi);
    let mut xr = Range {
        lo: mid - 0.5 * k * w,
        hi: mid + 0.5 * k * w,
    };
    // Widening a range of positive resistances should not invent negative ones: start at zero
    // (or as near to it as the width allows) instead of centring.
    if x.lo >= 0.0 && xr.lo < 0.0 {
        let lo = (x.hi - k * w).max(0.0).min(x.lo);
        xr = Range { lo, hi: lo + k * w };
    }
    let yr = if grow_up {
        Range {
            lo: y.lo,
            hi: y.lo + k * h,
        }
    } else {
        Range {
            lo: y.hi - k * h,
            hi: y.hi,
        }
    };
    (xr, yr)
}

/// Axis specs of a Nyquist plane with one SI prefix for both axes.
fn nyquist_specs(x: Range, y: Range) -> (AxisSpec, AxisSpec) {
    let max_abs = x.lo.abs().max(x.hi.abs()).max(y.lo.abs()).max(y.hi.abs());
    let unit = axis::si_unit(max_abs, "Ω");
    let mut xs = AxisSpec::linear(x, "Z′", "Ω");
    let mut ys = AxisSpec::linear(y, "−Z″", "Ω");
    xs.unit = unit.clone();
    ys.unit = unit;
    xs.quantity = "Z′".into();
    ys.quantity = "−Z″".into();
    (xs, ys)
}

/// Places an equally scaled Nyquist panel for the points (and annotation anchors that need room
/// above them for their labels).
fn nyquist_panel(body: Rect, pts: &[(f64, f64)], anchors: &[(f64, f64)], s: &Sizes) -> Panel {
    let xr = Range::of(pts.iter().map(|p| p.0), false).unwrap_or(Range { lo: 0.0, hi: 1.0 });
    let yr = Range::of(pts.iter().map(|p| p.1), false)
        .unwrap_or(Range { lo: 0.0, hi: 1.0 })
        .including(0.0);
    let base_x = xr.padded(0.05, false);
    let base_y = yr.padded(0.05, false);
    let grow_up = yr.hi > 0.0;
    let room = s.note * 2.0 + s.marker * 6.0 + 8.0;
    let top_anchor = anchors
        .iter()
        .map(|a| a.1)
        .filter(|v| axis::usable(*v))
        .fold(f64::NEG_INFINITY, f64::max);
    let (mut ex, mut ey) = (base_x, base_y);
    let mut left = 0.0;
    let mut k_prev: f64 = 0.0;
    for _ in 0..4 {
        let (xs, ys) = nyquist_specs(ex, ey);
        let (p, used) = place_panel(body, &xs, &ys, true, left, s);
        left = used.max(left);
        let mut need_y = base_y;
        if top_anchor.is_finite() && k_prev > 0.0 {
            need_y = need_y.including(top_anchor + room * k_prev);
        }
        (ex, ey) = equalize(base_x, need_y, p.rect.w(), p.rect.h(), grow_up);
        k_prev = ex.span() / p.rect.w();
    }
    let (xs, ys) = nyquist_specs(ex, ey);
    let (p, _) = place_panel(body, &xs, &ys, true, left, s);
    let mut need_y = base_y;
    if top_anchor.is_finite() && k_prev > 0.0 {
        need_y = need_y.including(top_anchor + room * k_prev);
    }
    let (ex, ey) = equalize(base_x, need_y, p.rect.w(), p.rect.h(), grow_up);
    let (xs, ys) = nyquist_specs(ex, ey);
    refit_panel(&p, &xs, &ys, s)
}

/// A thin line at −Z″ = 0 when it is inside the panel.
fn zero_line(sc: &mut Scene, p: &Panel) {
    if p.y.range.lo < 0.0 && p.y.range.hi > 0.0 {
        let y = p.py(0.0);
        sc.line((p.rect.x0, y), (p.rect.x1, y), MUTED, 1.0);
    }
}

fn series_entries(series: &[SeriesData], shapes: bool) -> Vec<Entry> {
    if series.iter().all(|s| s.label.is_empty()) {
        return Vec::new();
    }
    series
        .iter()
        .enumerate()
        .filter(|(_, s)| !s.label.is_empty())
        .map(|(i, s)| {
            let c = colormap::series(i);
            let shape = if shapes { shape_of(i) } else { Shape::Circle };
            Entry {
                label: s.label.clone(),
                sample: match s.style {
                    Style::Markers => Sample::Marker(shape, c),
                    Style::Line => Sample::Line(c),
                    Style::MarkersAndLine => Sample::MarkerLine(shape, c),
                },
            }
        })
        .collect()
}

fn shape_of(i: usize) -> Shape {
    [
        Shape::Circle,
        Shape::Square,
        Shape::Triangle,
        Shape::Diamond,
    ][i % 4]
}

/// Draws one series of pixel points in its style.
fn draw_series(sc: &mut Scene, pts: &[(f64, f64)], style: Style, c: Rgb, shape: Shape, s: &Sizes) {
    match style {
        Style::Markers => pts.iter().for_each(|&p| sc.marker(shape, p, s.marker, c)),
        Style::Line => sc.path(pts, c, s.line),
        Style::MarkersAndLine => {
            sc.path(pts, c, s.line * 0.6);
            pts.iter().for_each(|&p| sc.marker(shape, p, s.marker, c));
        }
    }
}

fn nyquist(sc: &mut Scene, plot: &NyquistPlot, s: &Sizes) {
    let entries = series_entries(&plot.series, true);
    let page = frame::page(sc, &plot.title, &entries, None, s);
    let per_series: Vec<Vec<(f64, f64)>> =
        plot.series.iter().map(|d| nyquist_points(&d.z)).collect();
    let all: Vec<(f64, f64)> = per_series.iter().flatten().copied().collect();
    let anchors: Vec<(f64, f64)> = plot.annotations.iter().map(|a| (a.z.re, -a.z.im)).collect();
    let panel = nyquist_panel(page.body, &all, &anchors, s);
    draw_grid(sc, &panel);
    zero_line(sc, &panel);
    let mut obstacles = Vec::new();
    for (i, (d, pts)) in plot.series.iter().zip(&per_series).enumerate() {
        let px: Vec<(f64, f64)> = pts.iter().map(|p| panel.pt(p.0, p.1)).collect();
        draw_series(sc, &px, d.style, colormap::series(i), shape_of(i), s);
        obstacles.extend(px);
    }
    if all.is_empty() {
        draw_no_data(sc, &panel, s, "no finite impedance values to show");
    }
    let notes: Vec<((f64, f64), String)> = plot
        .annotations
        .iter()
        .map(|a| (panel.pt(a.z.re, -a.z.im), a.text.clone()))
        .collect();
    draw_annotations(sc, &panel, &notes, &obstacles, s);
    draw_axes(sc, &panel, s);
    draw_legend(sc, &entries, page.legend, s);
}

fn overlay(sc: &mut Scene, plot: &OverlayPlot, s: &Sizes) {
    let values: Vec<f64> = plot
        .spectra
        .iter()
        .map(|o| o.value)
        .filter(|v| axis::usable(*v))
        .collect();
    let range = Range::of(values.iter().copied(), false).unwrap_or(Range { lo: 0.0, hi: 1.0 });
    let integer = !values.is_empty() && values.iter().all(|v| v.fract() == 0.0);
    let range = if range.span() > 0.0 {
        range
    } else {
        range.padded(0.05, false)
    };
    let bar = ColorBar {
        label: plot.colorbar_label.clone(),
        range,
        integer,
    };
    let page = frame::page(sc, &plot.title, &[], Some(&bar), s);
    let per: Vec<Vec<(f64, f64)>> = plot.spectra.iter().map(|o| nyquist_points(&o.z)).collect();
    let all: Vec<(f64, f64)> = per.iter().flatten().copied().collect();
    let panel = nyquist_panel(page.body, &all, &[], s);
    draw_grid(sc, &panel);
    zero_line(sc, &panel);
    // Lowest values first so the top of the colour range is drawn last.
    let mut order: Vec<usize> = (0..plot.spectra.len()).collect();
    order.sort_by(|&a, &b| plot.spectra[a].value.total_cmp(&plot.spectra[b].value));
    for i in order {
        let v = plot.spectra[i].value;
        let c = if axis::usable(v) {
            colormap::sequential(bar.frac(v))
        } else {
            colormap::sequential(f64::NAN)
        };
        let px: Vec<(f64, f64)> = per[i].iter().map(|p| panel.pt(p.0, p.1)).collect();
        sc.path(&px, c, s.line * 0.75);
        px.iter()
            .for_each(|&p| sc.marker(Shape::Circle, p, s.marker * 0.75, c));
    }
    if all.is_empty() {
        draw_no_data(sc, &panel, s, "no finite impedance values to show");
    }
    draw_axes(sc, &panel, s);
    if let Some(x) = page.colorbar_x {
        bar.draw(sc, x, &panel.rect, s);
    }
}

fn bode(sc: &mut Scene, plot: &BodePlot, s: &Sizes) {
    let entries = series_entries(&plot.series, true);
    let page = frame::page(sc, &plot.title, &entries, None, s);
    let mut f_all = Vec::new();
    let mut mag_all = Vec::new();
    let mut ph_all = Vec::new();
    let per: Vec<Vec<(f64, f64, f64)>> = plot
        .series
        .iter()
        .map(|d| {
            d.freq
                .iter()
                .zip(&d.z)
                .filter(|(f, z)| axis::usable_log(**f) && axis::usable(z.re) && axis::usable(z.im))
                .map(|(f, z)| (*f, z.norm(), -z.arg().to_degrees()))
                .filter(|p| axis::usable_log(p.1))
                .collect()
        })
        .collect();
    for p in per.iter().flatten() {
        f_all.push(p.0);
        mag_all.push(p.1);
        ph_all.push(p.2);
    }
    let fr = Range::of(f_all.iter().copied(), true)
        .unwrap_or(Range { lo: 1.0, hi: 1e4 })
        .padded(0.03, true);
    let mr = Range::of(mag_all.iter().copied(), true)
        .unwrap_or(Range { lo: 1.0, hi: 10.0 })
        .padded(0.06, true);
    let pr = Range::of(ph_all.iter().copied(), false)
        .unwrap_or(Range { lo: 0.0, hi: 90.0 })
        .including(0.0)
        .padded(0.06, false);
    let body = page.body;
    let split = body.y0 + body.h() * 0.5;
    let top = Rect { y1: split, ..body };
    let bottom = Rect { y0: split, ..body };
    let xs = AxisSpec::log(fr, "frequency", "Hz", false);
    let ms = AxisSpec::log(mr, "|Z|", "Ω", true);
    let ps = AxisSpec::linear(pr, "−φ", "°");
    let (_, l1) = place_panel(top, &xs, &ms, false, 0.0, s);
    let (_, l2) = place_panel(bottom, &xs, &ps, true, 0.0, s);
    let left = l1.max(l2);
    let (mag_panel, _) = place_panel(top, &xs, &ms, false, left, s);
    let (ph_panel, _) = place_panel(bottom, &xs, &ps, true, left, s);
    for panel in [&mag_panel, &ph_panel] {
        draw_grid(sc, panel);
    }
    zero_line(sc, &ph_panel);
    for (i, (d, pts)) in plot.series.iter().zip(&per).enumerate() {
        let c = colormap::series(i);
        let m: Vec<(f64, f64)> = pts.iter().map(|p| mag_panel.pt(p.0, p.1)).collect();
        let ph: Vec<(f64, f64)> = pts.iter().map(|p| ph_panel.pt(p.0, p.2)).collect();
        draw_series(sc, &m, d.style, c, shape_of(i), s);
        draw_series(sc, &ph, d.style, c, shape_of(i), s);
    }
    if f_all.is_empty() {
        draw_no_data(sc, &mag_panel, s, "no finite impedance values to show");
    }
    draw_axes(sc, &mag_panel, s);
    draw_axes(sc, &ph_panel, s);
    draw_legend(sc, &entries, page.legend, s);
}

fn residuals(sc: &mut Scene, plot: &ResidualPlot, s: &Sizes) {
    let (c_re, c_im) = (colormap::series(0), colormap::series(1));
    let band_paint = Paint::with_alpha(Rgb(0x9a, 0xa5, 0xb1), 0.35);
    let band = plot.band.filter(|b| axis::usable(*b) && *b > 0.0);
    let mut entries = vec![
        Entry {
            label: "Z′ residual".into(),
            sample: Sample::MarkerLine(Shape::Circle, c_re),
        },
        Entry {
            label: "Z″ residual".into(),
            sample: Sample::MarkerLine(Shape::Triangle, c_im),
        },
    ];
    if let Some(b) = band {
        entries.push(Entry {
            label: format!("Kramers–Kronig band ±{}", percent(b)),
            sample: Sample::Band(band_paint),
        });
    }
    let page = frame::page(sc, &plot.title, &entries, None, s);
    let n = plot.freq.len();
    let pick = |v: &[f64]| -> Vec<(f64, f64)> {
        (0..n)
            .filter_map(|i| Some((plot.freq[i], *v.get(i)? * 100.0)))
            .filter(|p| axis::usable_log(p.0) && axis::usable(p.1))
            .collect()
    };
    let (re, im) = (pick(&plot.re_rel), pick(&plot.im_rel));
    let fr = Range::of(re.iter().chain(&im).map(|p| p.0), true)
        .unwrap_or(Range { lo: 1.0, hi: 1e4 })
        .padded(0.03, true);
    let biggest = re
        .iter()
        .chain(&im)
        .map(|p| p.1.abs())
        .fold(band.map_or(0.0, |b| b * 100.0), f64::max);
    let biggest = if biggest > 0.0 { biggest * 1.15 } else { 1.0 };
    let yr = Range {
        lo: -biggest,
        hi: biggest,
    };
    let xs = AxisSpec::log(fr, "frequency", "Hz", false);
    let ys = AxisSpec::linear(yr, "relative residual", "%");
    let (panel, _) = place_panel(page.body, &xs, &ys, true, 0.0, s);
    if let Some(b) = band {
        let (ya, yb) = (panel.py(b * 100.0), panel.py(-b * 100.0));
        sc.rect((panel.rect.x0, ya), (panel.rect.x1, yb), band_paint, true);
    }
    draw_grid(sc, &panel);
    zero_line(sc, &panel);
    let sorted = |v: &[(f64, f64)]| {
        let mut v = v.to_vec();
        v.sort_by(|a, b| a.0.total_cmp(&b.0));
        v.iter().map(|p| panel.pt(p.0, p.1)).collect::<Vec<_>>()
    };
    draw_series(
        sc,
        &sorted(&re),
        Style::MarkersAndLine,
        c_re,
        Shape::Circle,
        s,
    );
    draw_series(
        sc,
        &sorted(&im),
        Style::MarkersAndLine,
        c_im,
        Shape::Triangle,
        s,
    );
    if re.is_empty() && im.is_empty() {
        draw_no_data(sc, &panel, s, "no finite residuals to show");
    }
    draw_axes(sc, &panel, s);
    draw_legend(sc, &entries, page.legend, s);
}

/// A fraction as a percentage with sensible digits: `1 %`, `0.5 %`.
fn percent(f: f64) -> String {
    let p = f * 100.0;
    let s = if p >= 10.0 {
        format!("{p:.0}")
    } else if p >= 1.0 {
        format!("{p:.1}")
    } else {
        format!("{p:.2}")
    };
    let s = if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_owned()
    } else {
        s
    };
    format!("{s} %")
}

fn drt(sc: &mut Scene, plot: &DrtPlot, s: &Sizes) {
    let page = frame::page(sc, &plot.title, &[], None, s);
    let mut pts: Vec<(f64, f64)> = plot
        .tau
        .iter()
        .zip(&plot.gamma)
        .map(|(t, g)| (*t, *g))
        .filter(|p| axis::usable_log(p.0) && axis::usable(p.1))
        .collect();
    pts.sort_by(|a, b| a.0.total_cmp(&b.0));
    let peaks: Vec<&DrtPeak> = plot
        .peaks
        .iter()
        .filter(|p| axis::usable_log(p.tau) && axis::usable(p.gamma))
        .collect();
    let tr = Range::of(
        pts.iter().map(|p| p.0).chain(peaks.iter().map(|p| p.tau)),
        true,
    )
    .unwrap_or(Range { lo: 1e-6, hi: 1.0 })
    .padded(0.03, true);
    let gr = Range::of(
        pts.iter().map(|p| p.1).chain(peaks.iter().map(|p| p.gamma)),
        false,
    )
    .unwrap_or(Range { lo: 0.0, hi: 1.0 })
    .including(0.0);
    // Headroom above the highest peak for its label.
    let gr = Range {
        lo: gr.lo - gr.span() * 0.03,
        hi: gr.hi + gr.span() * if peaks.is_empty() { 0.06 } else { 0.22 },
    };
    let gr = if gr.span() > 0.0 {
        gr
    } else {
        gr.padded(0.05, false)
    };
    let xs = AxisSpec::log(tr, "τ", "s", false);
    let ys = AxisSpec::linear(gr, "γ", "Ω");
    let (panel, _) = place_panel(page.body, &xs, &ys, true, 0.0, s);
    draw_grid(sc, &panel);
    zero_line(sc, &panel);
    let px: Vec<(f64, f64)> = pts.iter().map(|p| panel.pt(p.0, p.1)).collect();
    let c = colormap::series(0);
    sc.path(&px, c, s.line);
    if pts.is_empty() {
        draw_no_data(sc, &panel, s, "no finite DRT values to show");
    }
    let notes: Vec<((f64, f64), String)> = peaks
        .iter()
        .map(|p| {
            let text = p
                .label
                .clone()
                .unwrap_or_else(|| format!("τ = {}", axis::quantity(p.tau, "s")));
            (panel.pt(p.tau, p.gamma), text)
        })
        .collect();
    // The line as obstacles, densified so labels avoid it between samples too.
    let mut obstacles = Vec::new();
    for w in px.windows(2) {
        for k in 0..4 {
            let f = k as f64 / 4.0;
            obstacles.push((
                w[0].0 + (w[1].0 - w[0].0) * f,
                w[0].1 + (w[1].1 - w[0].1) * f,
            ));
        }
    }
    obstacles.extend(px.last().copied());
    draw_annotations(sc, &panel, &notes, &obstacles, s);
    draw_axes(sc, &panel, s);
}

fn trend(sc: &mut Scene, plot: &TrendPlot, s: &Sizes) {
    let any_flag = plot
        .series
        .iter()
        .flat_map(|c| &c.points)
        .any(|p| p.flagged);
    let any_err = plot
        .series
        .iter()
        .flat_map(|c| &c.points)
        .any(|p| p.y_err.is_some_and(|e| axis::usable(e) && e > 0.0));
    let mut entries: Vec<Entry> = plot
        .series
        .iter()
        .enumerate()
        .map(|(i, c)| Entry {
            label: if c.label.is_empty() {
                format!("series {}", i + 1)
            } else {
                c.label.clone()
            },
            sample: Sample::MarkerLine(shape_of(i), colormap::series(i)),
        })
        .collect();
    if any_flag {
        entries.push(Entry {
            label: "flagged".into(),
            sample: Sample::Marker(Shape::Ring, FLAG),
        });
    }
    if any_err {
        entries.push(Entry {
            label: "±1 standard error".into(),
            sample: Sample::ErrorBar(Shape::Circle, MUTED),
        });
    }
    let page = frame::page(sc, &plot.title, &entries, None, s);
    let ok = |p: &&super::TrendPoint| axis::usable(p.x) && axis::usable(p.y);
    let err = |p: &super::TrendPoint| {
        p.y_err
            .filter(|e| axis::usable(*e) && *e > 0.0)
            .unwrap_or(0.0)
    };
    let points = || plot.series.iter().flat_map(|c| c.points.iter()).filter(ok);
    let xr = Range::of(points().map(|p| p.x), false).unwrap_or(Range { lo: 0.0, hi: 1.0 });
    let yr = Range::union(
        Range::of(points().map(|p| p.y - err(p)), false),
        Range::of(points().map(|p| p.y + err(p)), false),
    )
    .unwrap_or(Range { lo: 0.0, hi: 1.0 });
    let integer_x = points().all(|p| p.x.fract() == 0.0) && points().next().is_some();
    let mut xs = AxisSpec::linear(xr.padded(0.05, false), &plot.x_label, &plot.x_unit);
    xs.integer = integer_x;
    if plot.x_unit.is_empty() || plot.x_unit == "%" {
        xs.unit = axis::si_unit(0.0, &plot.x_unit);
    }
    let ys = AxisSpec::linear(yr.padded(0.08, false), &plot.y_label, &plot.y_unit);
    let (panel, _) = place_panel(page.body, &xs, &ys, true, 0.0, s);
    draw_grid(sc, &panel);
    for (i, cell) in plot.series.iter().enumerate() {
        let c = colormap::series(i);
        let mut pts: Vec<&super::TrendPoint> = cell.points.iter().filter(ok).collect();
        pts.sort_by(|a, b| a.x.total_cmp(&b.x));
        let line: Vec<(f64, f64)> = pts.iter().map(|p| panel.pt(p.x, p.y)).collect();
        sc.path(&line, c, s.line * 0.6);
        for p in &pts {
            let e = err(p);
            let at = panel.pt(p.x, p.y);
            if e > 0.0 {
                let (a, b) = (panel.pt(p.x, p.y + e), panel.pt(p.x, p.y - e));
                let cap = s.marker * 1.4;
                sc.line(a, b, c, 1.2);
                sc.line((a.0 - cap, a.1), (a.0 + cap, a.1), c, 1.2);
                sc.line((b.0 - cap, b.1), (b.0 + cap, b.1), c, 1.2);
            }
            sc.marker(shape_of(i), at, s.marker * 1.2, c);
            if p.flagged {
                sc.prims.push(super::scene::Prim::Circle {
                    c: at,
                    r: s.marker * 3.0,
                    paint: FLAG.into(),
                    fill: false,
                    width: 2.0,
                });
            }
        }
    }
    if points().next().is_none() {
        draw_no_data(sc, &panel, s, "no finite values to show");
    }
    draw_axes(sc, &panel, s);
    draw_legend(sc, &entries, page.legend, s);
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn equalize_gives_same_ohm_per_pixel() {
        let (x, y) = equalize(
            Range { lo: 0.0, hi: 100.0 },
            Range { lo: 0.0, hi: 10.0 },
            700.0,
            400.0,
            true,
        );
        assert!((x.span() / 700.0 - y.span() / 400.0).abs() < 1e-12);
        assert_eq!(y.lo, 0.0);
        assert_eq!(x.span(), 100.0);
        // A tall area widens x; a positive range starts at zero rather than going negative.
        let (x, y) = equalize(
            Range { lo: 10.0, hi: 50.0 },
            Range { lo: 0.0, hi: 80.0 },
            400.0,
            400.0,
            true,
        );
        assert_eq!((x.lo, x.hi), (0.0, 80.0));
        assert_eq!(y.span(), 80.0);
    }
}
