//! SVG plots of a distortion curve ([`curve_svg`]): two panels, distortion
//! (log scale) against codebook size and against rate in bits per index,
//! with the knee, the recommended size and the target marked. Drawn with
//! `plotters`' SVG backend, which writes text as `<text>` elements, so no
//! font is needed to draw and any viewer shows the labels. Never measures.

use std::ops::Range;

use plotters::coord::ranged1d::{AsRangedCoord, ValueFormatter};
use plotters::coord::Shift;
use plotters::prelude::*;

use crate::curve::{Curve, CurvePoint, InputKind};
use crate::error::{Error, ErrorKind, Result};

/// Width and height of the whole drawing in SVG pixels.
pub const PLOT_SIZE: (u32, u32) = (1100, 480);

const TRAINING: RGBColor = RGBColor(31, 94, 170);
const HELD_OUT: RGBColor = RGBColor(214, 96, 26);
const ENTROPY: RGBColor = RGBColor(46, 139, 87);
const MARK: RGBColor = RGBColor(180, 30, 60);
const TARGET: RGBColor = RGBColor(110, 110, 110);

fn plot_error(e: impl std::fmt::Display) -> Error {
    Error::new(
        "drawing plot",
        ErrorKind::Io(std::io::Error::other(e.to_string())),
    )
}

/// One line with markers.
struct Series {
    label: String,
    points: Vec<(f64, f64)>,
    colour: RGBColor,
    dashed: bool,
}

/// What a panel marks besides its series.
struct Marks {
    knee: Option<(f64, f64)>,
    recommended: Option<(f64, f64, usize)>,
    target_mse: Option<f64>,
}

/// Words of one panel.
struct PanelText<'a> {
    caption: &'a str,
    x: &'a str,
    y: &'a str,
}

/// The SVG text of `curve`'s plot, titled `title` (e.g. the input's name).
///
/// ```
/// use vqforge::curve::{measure_curve, CurveConfig, CurveSource, RecordSource, Sizes};
/// use vqforge::export::curve_svg;
/// use vqforge::kmeans::TrainConfig;
/// use vqforge::load::{CsvOptions, RecordTable};
///
/// let values: Vec<f64> = (0..90).map(|i| (i % 3) as f64 * 10.0 + (i % 7) as f64 * 0.1).collect();
/// let table = RecordTable::new(vec!["v".into()], values);
/// let config = CurveConfig::new(TrainConfig::new(1)).sizes(Sizes::parse("1..8")?).check()?;
/// let source = CurveSource::Records(RecordSource::new(&[table], &CsvOptions::new(), &config)?);
/// let curve = measure_curve(&source, &config, &|_| {})?;
/// let svg = curve_svg(&curve, "readings")?;
/// assert!(svg.starts_with("<svg") && svg.contains("<text") && svg.contains("knee"));
/// # Ok::<(), vqforge::Error>(())
/// ```
pub fn curve_svg(curve: &Curve, title: &str) -> Result<String> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, PLOT_SIZE).into_drawing_area();
        root.fill(&WHITE).map_err(plot_error)?;
        let root = root.titled(title, ("sans-serif", 22)).map_err(plot_error)?;
        let (left, right) = root.split_horizontally(PLOT_SIZE.0 / 2);
        let y_label = match curve.kind {
            InputKind::Records => "mse per value (scaled units, log scale)",
            InputKind::Images => "mse per channel (8-bit sRGB, log scale)",
        };
        let x_size = match curve.kind {
            InputKind::Records => "codebook size (codewords, log scale)",
            InputKind::Images => "palette size (colours, log scale)",
        };
        let positive = |p: &&CurvePoint| p.mse > 0.0;
        let mut by_size = vec![Series {
            label: "training".into(),
            points: curve
                .points
                .iter()
                .filter(positive)
                .map(|p| (p.size as f64, p.mse))
                .collect(),
            colour: TRAINING,
            dashed: false,
        }];
        let held: Vec<(f64, f64)> = curve
            .points
            .iter()
            .filter_map(|p| p.holdout.as_ref().map(|h| (p.size as f64, h.mse)))
            .filter(|&(_, m)| m > 0.0)
            .collect();
        if !held.is_empty() {
            by_size.push(Series {
                label: "held out".into(),
                points: held,
                colour: HELD_OUT,
                dashed: true,
            });
        }
        let all: Vec<&CurvePoint> = curve.points.iter().chain(&curve.searched).collect();
        let find = |size: usize| all.iter().find(|p| p.size == size).copied();
        let knee = curve.knee.and_then(find);
        let recommended = curve.recommendation.size().and_then(find);
        let marks = |x: &dyn Fn(&CurvePoint) -> f64| Marks {
            knee: knee.filter(|p| p.mse > 0.0).map(|p| (x(p), p.mse)),
            recommended: recommended
                .filter(|p| p.mse > 0.0)
                .map(|p| (x(p), p.mse, p.size)),
            target_mse: curve.target_mse,
        };
        let sizes: Vec<f64> = all.iter().map(|p| p.size as f64).collect();
        let (lo, hi) = span(&sizes);
        let x_range = (lo / 1.2..hi * 1.2).log_scale().base(2.0);
        panel(
            &left,
            x_range,
            y_span(curve),
            &PanelText {
                caption: "distortion against size",
                x: x_size,
                y: y_label,
            },
            &by_size,
            &marks(&|p| p.size as f64),
        )?;

        // Several sizes share one ⌈log2 k⌉: the fixed-rate line joins the
        // lowest distortion at each.
        let mut fixed: Vec<(f64, f64)> = Vec::new();
        for p in curve.points.iter().filter(positive) {
            let b = p.rate.bits_per_index as f64;
            match fixed.last_mut() {
                Some(last) if last.0 == b => last.1 = last.1.min(p.mse),
                _ => fixed.push((b, p.mse)),
            }
        }
        let by_rate = vec![
            Series {
                label: "⌈log2 k⌉ bits per index".into(),
                points: fixed,
                colour: TRAINING,
                dashed: false,
            },
            Series {
                label: "index entropy (ideal entropy coder)".into(),
                points: curve
                    .points
                    .iter()
                    .filter(positive)
                    .map(|p| (p.rate.index_entropy_bits, p.mse))
                    .collect(),
                colour: ENTROPY,
                dashed: true,
            },
        ];
        let bits: Vec<f64> = all
            .iter()
            .flat_map(|p| [p.rate.bits_per_index as f64, p.rate.index_entropy_bits])
            .collect();
        let (lo, hi) = span(&bits);
        panel(
            &right,
            (lo - 0.3).max(0.0)..hi + 0.3,
            y_span(curve),
            &PanelText {
                caption: "distortion against rate",
                x: "rate (bits per index)",
                y: y_label,
            },
            &by_rate,
            &marks(&|p| p.rate.bits_per_index as f64),
        )?;
        root.present().map_err(plot_error)?;
    }
    Ok(svg)
}

fn span(values: &[f64]) -> (f64, f64) {
    let lo = values.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if lo.is_finite() && hi > lo {
        (lo, hi)
    } else if lo.is_finite() {
        (lo * 0.5, lo * 2.0 + 1.0)
    } else {
        (1.0, 2.0)
    }
}

/// The mse range of every point, held-out figure and target, padded down
/// to a power of the axis' base so the lowest tick is labelled. Base 2 when
/// the values span less than three decades (base-10 ticks would be too
/// few), base 10 otherwise.
fn y_span(curve: &Curve) -> LogCoord<f64> {
    let mut values: Vec<f64> = curve
        .points
        .iter()
        .chain(&curve.searched)
        .flat_map(|p| std::iter::once(p.mse).chain(p.holdout.as_ref().map(|h| h.mse)))
        .chain(curve.target_mse)
        .filter(|&v| v > 0.0 && v.is_finite())
        .collect();
    if values.is_empty() {
        values.push(1.0);
    }
    let (lo, hi) = span(&values);
    let base: f64 = if hi / lo < 1000.0 { 2.0 } else { 10.0 };
    let bottom = base.powf((lo / 1.1).log(base).floor());
    (bottom..hi * 1.3).log_scale().base(base).into()
}

/// About three significant digits, plain where readable.
fn short(v: f64) -> String {
    let a = v.abs();
    if a == 0.0 {
        "0".into()
    } else if (1e-3..1e5).contains(&a) {
        let decimals = (2 - a.log10().floor() as i32).clamp(0, 6) as usize;
        let s = format!("{v:.decimals$}");
        if s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            s
        }
    } else {
        format!("{v:.2e}")
    }
}

fn panel<X>(
    area: &DrawingArea<SVGBackend<'_>, Shift>,
    x: X,
    y: LogCoord<f64>,
    text: &PanelText<'_>,
    series: &[Series],
    marks: &Marks,
) -> Result<()>
where
    X: AsRangedCoord<Value = f64>,
    X::CoordDescType: ValueFormatter<f64>,
{
    let mut chart = ChartBuilder::on(area)
        .caption(text.caption, ("sans-serif", 18))
        .margin(12)
        .x_label_area_size(48)
        .y_label_area_size(78)
        .build_cartesian_2d(x, y)
        .map_err(plot_error)?;
    chart
        .configure_mesh()
        .x_desc(text.x)
        .y_desc(text.y)
        .x_label_formatter(&|v| short(*v))
        .y_label_formatter(&|v| short(*v))
        .axis_desc_style(("sans-serif", 15))
        .label_style(("sans-serif", 12))
        .light_line_style(RGBColor(238, 238, 238))
        .x_max_light_lines(1)
        .y_max_light_lines(1)
        .draw()
        .map_err(plot_error)?;
    let (x_lo, x_hi) = {
        let r: Range<f64> = chart.x_range();
        (r.start, r.end)
    };
    if let Some(t) = marks.target_mse {
        chart
            .draw_series(DashedLineSeries::new(
                [(x_lo, t), (x_hi, t)],
                6,
                4,
                TARGET.stroke_width(1),
            ))
            .map_err(plot_error)?
            .label("target")
            .legend(|(x, y)| PathElement::new([(x, y), (x + 18, y)], TARGET));
    }
    for s in series {
        let style = s.colour.stroke_width(2);
        if s.dashed {
            chart
                .draw_series(DashedLineSeries::new(s.points.clone(), 8, 5, style))
                .map_err(plot_error)?
                .label(s.label.as_str())
                .legend(move |(x, y)| PathElement::new([(x, y), (x + 18, y)], style));
        } else {
            chart
                .draw_series(LineSeries::new(s.points.clone(), style))
                .map_err(plot_error)?
                .label(s.label.as_str())
                .legend(move |(x, y)| PathElement::new([(x, y), (x + 18, y)], style));
        }
        chart
            .draw_series(
                s.points
                    .iter()
                    .map(|&p| Circle::new(p, 3, s.colour.filled())),
            )
            .map_err(plot_error)?;
    }
    let font = ("sans-serif", 14).into_font().color(&MARK);
    if let Some(at) = marks.knee {
        chart
            .draw_series(std::iter::once(
                EmptyElement::at(at)
                    + Circle::new((0, 0), 8, MARK.stroke_width(2))
                    + Text::new("knee", (8, -24), font.clone()),
            ))
            .map_err(plot_error)?;
    }
    if let Some((rx, ry, size)) = marks.recommended {
        chart
            .draw_series(std::iter::once(
                EmptyElement::at((rx, ry))
                    + TriangleMarker::new((0, 0), 9, MARK.filled())
                    + Text::new(format!("recommended: {size}"), (-128, 6), font.clone()),
            ))
            .map_err(plot_error)?;
    }
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::UpperRight)
        .background_style(WHITE.mix(0.85))
        .border_style(RGBColor(200, 200, 200))
        .label_font(("sans-serif", 13))
        .draw()
        .map_err(plot_error)?;
    Ok(())
}
