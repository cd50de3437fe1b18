//! Rendering tests: geometry read back from the scene, well-formed SVG, decodable PNG, and odd data
//! that must not panic. Spectra come from eis-core's simulator.

use super::scene::Prim;
use super::*;
use eis_core::circuit::parse;
use eis_core::eval::{Plan, log_frequencies};
use eis_core::simulate::simulate;
use eis_core::testing::slope;

/// The texts of a scene, in drawing order.
fn texts(sc: &scene::Scene) -> Vec<&str> {
    sc.prims
        .iter()
        .filter_map(|p| match p {
            Prim::Text { text, .. } => Some(text.as_str()),
            _ => None,
        })
        .collect()
}

/// A two-arc spectrum in the milliohm range (a cell), high to low frequency.
fn cell() -> (Vec<f64>, Vec<Complex64>) {
    let c = parse("R0 + R1|Q1 + R2|Q2").unwrap();
    let plan = Plan::compile(&c);
    let f = log_frequencies(1e5, 0.01, 8);
    let s = simulate(&plan, &[0.02, 0.01, 1e-2, 0.9, 0.03, 20.0, 0.85], &f, None);
    (s.frequency_hz, s.z)
}

fn nyquist_of(freq: Vec<f64>, z: Vec<Complex64>) -> Plot {
    let annotations = arc_apexes(&freq, &z);
    Plot::Nyquist(NyquistPlot {
        title: "cell".into(),
        series: vec![SeriesData::markers("", freq, z)],
        annotations,
    })
}

fn circles(sc: &scene::Scene) -> Vec<(f64, f64)> {
    sc.prims
        .iter()
        .filter_map(|p| match p {
            Prim::Circle { c, fill: true, .. } => Some(*c),
            _ => None,
        })
        .collect()
}

#[test]
fn nyquist_has_equal_scaling_in_every_shape_of_picture() {
    let (f, z) = cell();
    for (w, h) in [
        (900.0, 650.0),
        (600.0, 900.0),
        (1600.0, 500.0),
        (300.0, 200.0),
    ] {
        let sc = kinds::scene(&nyquist_of(f.clone(), z.clone()), w, h);
        let px = circles(&sc);
        assert_eq!(px.len(), z.len(), "one marker per point at {w}×{h}");
        let re: Vec<f64> = z.iter().map(|z| z.re).collect();
        let im: Vec<f64> = z.iter().map(|z| -z.im).collect();
        let kx = slope(&re, &px.iter().map(|p| p.0).collect::<Vec<_>>());
        let ky = slope(&im, &px.iter().map(|p| p.1).collect::<Vec<_>>());
        assert!(kx > 0.0 && ky < 0.0, "x right, −Z″ up");
        assert!(
            (kx / -ky - 1.0).abs() < 1e-9,
            "pixels per Ω {kx} vs {ky} at {w}×{h}"
        );
    }
}

#[test]
fn nyquist_marks_both_arcs_with_frequencies() {
    let (f, z) = cell();
    let notes = arc_apexes(&f, &z);
    assert_eq!(notes.len(), 2, "{notes:?}");
    assert!(notes.iter().all(|n| n.text.ends_with("Hz")));
}

#[test]
fn nyquist_uses_milliohms_for_a_cell() {
    let (f, z) = cell();
    let sc = kinds::scene(&nyquist_of(f, z), 900.0, 650.0);
    let texts = texts(&sc);
    assert!(texts.contains(&"Z′ / mΩ"), "{texts:?}");
    assert!(texts.contains(&"−Z″ / mΩ"), "{texts:?}");
}

/// Tags open and close in order and the root is `svg`.
fn well_formed(svg: &str) -> Result<usize, String> {
    let mut stack: Vec<String> = Vec::new();
    let mut count = 0;
    let mut rest = svg;
    while let Some(i) = rest.find('<') {
        let j = rest[i..].find('>').ok_or("unclosed tag")? + i;
        let tag = &rest[i + 1..j];
        if let Some(name) = tag.strip_prefix('/') {
            let open = stack.pop().ok_or("close without open")?;
            if open != name.trim() {
                return Err(format!("</{name}> closes <{open}>"));
            }
        } else if !tag.ends_with('/') {
            let name = tag.split_whitespace().next().unwrap_or("").to_owned();
            if count == 0 && name != "svg" {
                return Err(format!("root is {name}"));
            }
            stack.push(name);
        }
        count += 1;
        rest = &rest[j + 1..];
    }
    if stack.is_empty() {
        Ok(count)
    } else {
        Err(format!("unclosed {stack:?}"))
    }
}

fn every_kind() -> Vec<Plot> {
    let (f, z) = cell();
    let tau: Vec<f64> = (0..60)
        .map(|k| 10f64.powf(-6.0 + 0.12 * k as f64))
        .collect();
    let gamma: Vec<f64> = tau
        .iter()
        .map(|t| 0.01 * (-(t.log10() + 2.0).powi(2)).exp())
        .collect();
    vec![
        nyquist_of(f.clone(), z.clone()),
        Plot::Bode(BodePlot {
            title: "bode".into(),
            series: vec![
                SeriesData::markers("data", f.clone(), z.clone()),
                SeriesData::line("fit", f.clone(), z.clone()),
            ],
        }),
        Plot::Residuals(ResidualPlot {
            title: "res".into(),
            freq: f.clone(),
            re_rel: f.iter().map(|x| 0.003 * x.log10().sin()).collect(),
            im_rel: f.iter().map(|x| 0.002 * x.log10().cos()).collect(),
            band: Some(0.005),
        }),
        Plot::Drt(DrtPlot {
            title: "drt".into(),
            peaks: drt_peaks(&tau, &gamma),
            tau,
            gamma,
        }),
        Plot::Overlay(OverlayPlot {
            title: "overlay".into(),
            spectra: (0..5)
                .map(|k| OverlaySpectrum {
                    label: format!("{k}"),
                    freq: f.clone(),
                    z: z.iter().map(|z| z * (1.0 + 0.1 * k as f64)).collect(),
                    value: 20.0 * k as f64,
                })
                .collect(),
            colorbar_label: "SOC / %".into(),
        }),
        Plot::Trend(TrendPlot {
            title: "trend".into(),
            series: vec![TrendSeries {
                label: "A1".into(),
                points: (0..6)
                    .map(|k| TrendPoint {
                        x: 100.0 * k as f64,
                        y: 0.01 + 1e-4 * k as f64,
                        y_err: Some(2e-5),
                        flagged: k == 3,
                    })
                    .collect(),
            }],
            x_label: "cycle".into(),
            x_unit: String::new(),
            y_label: "Rct".into(),
            y_unit: "Ω".into(),
        }),
    ]
}

#[test]
fn every_kind_renders_valid_svg_and_png() {
    for plot in every_kind() {
        let svg = String::from_utf8(render(&plot, Format::Svg, 900, 650).unwrap()).unwrap();
        let n = well_formed(&svg).unwrap_or_else(|e| panic!("{e} in {plot:?}"));
        assert!(n > 20 && svg.contains("<text"), "text stays text");
        let png = render(&plot, Format::Png, 450, 325).unwrap();
        let decoder = png::Decoder::new(std::io::Cursor::new(&png));
        let mut reader = decoder.read_info().unwrap();
        let mut buf = vec![0; reader.output_buffer_size().unwrap()];
        let info = reader.next_frame(&mut buf).unwrap();
        assert_eq!((info.width, info.height), (450, 325));
        let dark = buf.chunks(3).filter(|p| p.iter().all(|&c| c < 100)).count();
        assert!(dark > 500, "ink on the page: {dark} dark pixels");
    }
}

#[test]
fn overlay_draws_a_colour_bar() {
    let plot = every_kind().remove(4);
    let sc = kinds::scene(&plot, 900.0, 650.0);
    let swatches: Vec<(f64, super::colormap::Rgb)> = sc
        .prims
        .iter()
        .filter_map(|p| match p {
            Prim::Rect {
                a,
                paint,
                fill: true,
                ..
            } if paint.rgb != super::colormap::Rgb(255, 255, 255) => Some((a.0, paint.rgb)),
            _ => None,
        })
        .collect();
    assert!(swatches.len() > 50, "{} swatches", swatches.len());
    assert!(swatches.iter().all(|s| s.0 == swatches[0].0), "one column");
    assert!(swatches[0].0 > 700.0, "right of the axes");
    let texts = texts(&sc);
    for t in ["SOC / %", "0", "80"] {
        assert!(texts.contains(&t), "{t} in {texts:?}");
    }
}

#[test]
fn odd_data_never_panics() {
    let c = |re: f64, im: f64| Complex64::new(re, im);
    let spectra: Vec<(Vec<f64>, Vec<Complex64>)> = vec![
        (vec![], vec![]),
        (vec![1e3], vec![c(0.01, -0.002)]),
        (
            vec![1e3, 1e4, 1e5],
            vec![c(0.01, 0.001), c(0.011, 0.01), c(0.012, 0.1)],
        ),
        (
            vec![1e-6, 1.0, 1e9],
            vec![c(1e-3, -1e-9), c(1e8, -5e7), c(1e9, -1.0)],
        ),
        (
            vec![10.0, f64::NAN, -1.0, 0.0],
            vec![
                c(f64::NAN, 1.0),
                c(1.0, f64::INFINITY),
                c(1.0, -1.0),
                c(2.0, -1.0),
            ],
        ),
        (vec![1.0, 2.0], vec![c(5.0, -1.0), c(5.0, -1.0)]),
        (vec![1.0, 2.0], vec![c(0.0, 0.0), c(0.0, 0.0)]),
        (vec![1.0, 2.0], vec![c(1e305, -1e305), c(-1e305, 1e305)]),
        (vec![1.0, 2.0, 3.0], vec![c(1.0, -1.0)]),
    ];
    for (f, z) in spectra {
        let plots = vec![
            nyquist_of(f.clone(), z.clone()),
            Plot::Bode(BodePlot {
                title: String::new(),
                series: vec![SeriesData::markers("x", f.clone(), z.clone())],
            }),
            Plot::Overlay(OverlayPlot {
                title: String::new(),
                spectra: vec![OverlaySpectrum {
                    label: "x".into(),
                    freq: f.clone(),
                    z: z.clone(),
                    value: f64::NAN,
                }],
                colorbar_label: String::new(),
            }),
            Plot::Residuals(ResidualPlot {
                title: String::new(),
                freq: f.clone(),
                re_rel: z.iter().map(|z| z.re).collect(),
                im_rel: vec![f64::NAN],
                band: Some(f64::INFINITY),
            }),
            Plot::Drt(DrtPlot {
                title: String::new(),
                tau: f.clone(),
                gamma: z.iter().map(|z| z.im).collect(),
                peaks: vec![DrtPeak {
                    tau: -1.0,
                    gamma: f64::NAN,
                    label: None,
                }],
            }),
            Plot::Trend(TrendPlot {
                title: String::new(),
                series: vec![TrendSeries {
                    label: String::new(),
                    points: f
                        .iter()
                        .zip(&z)
                        .map(|(x, z)| TrendPoint {
                            x: *x,
                            y: z.re,
                            y_err: Some(z.im),
                            flagged: true,
                        })
                        .collect(),
                }],
                ..TrendPlot::default()
            }),
        ];
        for plot in plots {
            for (w, h) in [(100, 100), (900, 650)] {
                let svg = render(&plot, Format::Svg, w, h).unwrap();
                well_formed(std::str::from_utf8(&svg).unwrap()).unwrap();
            }
            // PNG paints the same scene; one small size keeps the debug-build test quick.
            render(&plot, Format::Png, 200, 150).unwrap();
        }
    }
}

#[test]
fn sizes_outside_the_limits_are_errors() {
    let plot = every_kind().remove(0);
    assert!(matches!(
        render(&plot, Format::Svg, 50, 650),
        Err(PlotError::Size { .. })
    ));
    assert!(matches!(
        render(&plot, Format::Png, 900, 20_000),
        Err(PlotError::Size { .. })
    ));
}

#[test]
fn format_from_extension() {
    use std::path::Path;
    assert_eq!(
        Format::from_extension(Path::new("a/b.PNG")),
        Some(Format::Png)
    );
    assert_eq!(
        Format::from_extension(Path::new("b.svg")),
        Some(Format::Svg)
    );
    assert_eq!(Format::from_extension(Path::new("b.pdf")), None);
}
