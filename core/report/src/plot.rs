//! Figures drawn to SVG with plotters, embedded in the PDF by typst (which renders the SVG's
//! text with the report's own fonts). The figures are described by the analyses as data
//! (`beamproof_api::Figure`); only this module decides how they look.
//!
//! Colours: series and bands use a fixed palette whose members differ in lightness as well as
//! hue, and measured data is drawn as markers while calculated data is a line, so charts stay
//! readable in greyscale print and to colour-blind readers. Gamma maps use a scale that gets
//! monotonically darker with gamma and changes hue family at gamma = 1 (pale to mid blue for
//! passing points, rust to deep brown for failing ones); dose-difference maps use a diverging
//! blue / near-white / brown scale centred on zero.

use beamproof_api::{Band, Figure, Series, SeriesStyle, Span};
use plotters::coord::Shift;
use plotters::prelude::*;

/// The most cells drawn along one axis of a map; larger maps are reduced by blocks, each drawn
/// cell showing the most extreme value it covers (largest gamma, largest absolute difference),
/// so that no failing point disappears from the picture.
pub const MAX_MAP_CELLS: usize = 150;
/// Width of the colour bar beside a map, SVG pixels.
const BAR_AREA: u32 = 150;

const FONT: &str = "sans-serif";
/// Text sizes in SVG pixels; a 640-pixel figure is printed about 16 cm wide, so 15 pixels
/// print at about 10 pt, the size of the body text.
const LABEL: u32 = 15;
const DESC: u32 = 16;
const SMALL: u32 = 14;
const INK: RGBColor = RGBColor(0x1f, 0x2a, 0x36);
const MUTED: RGBColor = RGBColor(0x5d, 0x6b, 0x78);
const GRID: RGBColor = RGBColor(0xe3, 0xe7, 0xeb);
const SERIES: [RGBColor; 5] = [
    RGBColor(0x1b, 0x3a, 0x5c), // deep blue
    RGBColor(0xd9, 0x82, 0x2b), // amber
    RGBColor(0x2f, 0x8f, 0x83), // teal
    RGBColor(0x8e, 0x5a, 0xa8), // plum
    RGBColor(0x6b, 0x6b, 0x6b), // grey
];
const BANDS: [RGBColor; 3] = [
    RGBColor(0xd9, 0x82, 0x2b),
    RGBColor(0x2f, 0x8f, 0x83),
    RGBColor(0x8e, 0x5a, 0xa8),
];
const PASS_BAR: RGBColor = RGBColor(0x7e, 0xa3, 0xc4);
const FAIL_BAR: RGBColor = RGBColor(0xa8, 0x4a, 0x22);

/// What kind of picture a figure becomes, for the template's layout.
pub fn kind(f: &Figure) -> &'static str {
    match f {
        Figure::Chart { .. } => "chart",
        Figure::Histogram { .. } => "histogram",
        Figure::Map { .. } => "map",
    }
}

/// The figure's title, printed by the template as its caption.
pub fn title(f: &Figure) -> &str {
    match f {
        Figure::Chart { title, .. }
        | Figure::Histogram { title, .. }
        | Figure::Map { title, .. } => title,
    }
}

/// Draw a figure to SVG text.
pub fn draw(f: &Figure) -> Result<String, String> {
    let mut svg = String::new();
    match f {
        Figure::Chart {
            x_label,
            y_label,
            series,
            bands,
            spans,
            ..
        } => chart(&mut svg, x_label, y_label, series, bands, spans),
        Figure::Histogram {
            x_label,
            edges,
            counts,
            ..
        } => histogram(&mut svg, x_label, edges, counts),
        Figure::Map {
            quantity,
            unit,
            x_label,
            y_label,
            x_mm,
            y_mm,
            values,
            ..
        } => map(
            &mut svg, quantity, unit, x_label, y_label, x_mm, y_mm, values,
        ),
    }
    .map_err(|e| format!("{e:?}"))?;
    Ok(svg)
}

type DrawResult = Result<(), Box<dyn std::error::Error>>;

/// Tick text: at most three decimals, no trailing zeros, never `-0`.
pub fn tick(v: f64) -> String {
    let s = format!("{v:.3}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" || s.is_empty() {
        "0".into()
    } else {
        s.to_string()
    }
}

/// A range that contains every value with a margin, never empty.
fn padded(lo: f64, hi: f64, margin: f64) -> (f64, f64) {
    if !(lo.is_finite() && hi.is_finite()) {
        return (0.0, 1.0);
    }
    let span = hi - lo;
    if span <= f64::EPSILON * hi.abs().max(1.0) {
        // A single value: whole numbers (point numbers, counts) get one unit either side.
        let d = if lo == 0.0 || lo.fract() == 0.0 {
            1.0
        } else {
            0.05 * lo.abs()
        };
        return (lo - d, hi + d);
    }
    (lo - margin * span, hi + margin * span)
}

fn extent(values: impl Iterator<Item = f64>) -> (f64, f64) {
    values
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(v), b.max(v))
        })
}

/// Finite (x, y) runs of a series: a NaN breaks a line. Each run is thinned for drawing to at
/// most [`MAX_DRAWN`] points (see [`thin`]); the results keep every point.
fn runs(s: &Series) -> Vec<Vec<(f64, f64)>> {
    let mut out = vec![Vec::new()];
    for (&x, &y) in s.x.iter().zip(&s.y) {
        if x.is_finite() && y.is_finite() {
            if let Some(r) = out.last_mut() {
                r.push((x, y));
            }
        } else if out.last().is_some_and(|r| !r.is_empty()) {
            out.push(Vec::new());
        }
    }
    out.retain(|r| !r.is_empty());
    out.into_iter().map(thin).collect()
}

/// Most points drawn of one run of a series: a 640-pixel-wide chart shows no more, and a scan
/// of millions of points would otherwise make an SVG too large to typeset.
pub const MAX_DRAWN: usize = 2000;

/// Thin a run to at most [`MAX_DRAWN`] points by min-max decimation: the run is cut into
/// consecutive buckets and each keeps its first and last point and its lowest and highest
/// point, in their original order, so every extreme (a spike, a dip, the field edges) stays
/// visible (common practice in plotting large series, no single source).
fn thin(run: Vec<(f64, f64)>) -> Vec<(f64, f64)> {
    if run.len() <= MAX_DRAWN {
        return run;
    }
    let per = run.len().div_ceil(MAX_DRAWN / 4);
    let mut out = Vec::with_capacity(MAX_DRAWN);
    for bucket in run.chunks(per) {
        let (mut lo, mut hi) = (0, 0);
        for (i, p) in bucket.iter().enumerate() {
            if p.1 < bucket[lo].1 {
                lo = i;
            }
            if p.1 > bucket[hi].1 {
                hi = i;
            }
        }
        let mut keep = [0, lo, hi, bucket.len() - 1];
        keep.sort_unstable();
        let mut last = usize::MAX;
        for k in keep {
            if k != last {
                out.push(bucket[k]);
                last = k;
            }
        }
    }
    out
}

fn chart(
    svg: &mut String,
    x_label: &str,
    y_label: &str,
    series: &[Series],
    bands: &[Band],
    spans: &[Span],
) -> DrawResult {
    let (x0, x1) = extent(series.iter().flat_map(|s| s.x.iter().copied()));
    let (y0, y1) = extent(
        series
            .iter()
            .flat_map(|s| s.y.iter().copied())
            .chain(bands.iter().flat_map(|b| [b.low, b.high])),
    );
    let (x0, x1) = padded(x0, x1, 0.02);
    let (y0, y1) = padded(y0, y1, 0.08);
    let root = SVGBackend::with_string(svg, (640, 340)).into_drawing_area();
    root.fill(&WHITE)?;
    let mut c = ChartBuilder::on(&root)
        .margin(12)
        .x_label_area_size(42)
        .y_label_area_size(60)
        .build_cartesian_2d(x0..x1, y0..y1)?;
    c.configure_mesh()
        .max_light_lines(1)
        .light_line_style(GRID.mix(0.5))
        .bold_line_style(GRID)
        .axis_style(MUTED)
        .x_desc(x_label)
        .y_desc(y_label)
        .x_label_formatter(&|v| tick(*v))
        .y_label_formatter(&|v| tick(*v))
        .label_style((FONT, LABEL).into_font().color(&INK))
        .axis_desc_style((FONT, DESC).into_font().color(&INK))
        .draw()?;
    // Widest band first, in opaque pale tints, so a nested (tolerance inside action) band
    // reads as its own zone instead of a blend.
    let mut order: Vec<usize> = (0..bands.len()).collect();
    order.sort_by(|&p, &q| {
        (bands[q].high - bands[q].low)
            .total_cmp(&(bands[p].high - bands[p].low))
            .then(p.cmp(&q))
    });
    for i in order {
        let b = &bands[i];
        let col = BANDS[i % BANDS.len()];
        let tint = lerp(WHITE, col, 0.16);
        c.draw_series(std::iter::once(Rectangle::new(
            [(x0, b.low), (x1, b.high)],
            tint.filled(),
        )))?
        .label(b.label.clone())
        .legend(move |(x, y)| {
            Rectangle::new(
                [(x, y - 5), (x + 18, y + 5)],
                lerp(WHITE, col, 0.35).filled(),
            )
        });
        for edge in [b.low, b.high] {
            c.draw_series(std::iter::once(PathElement::new(
                vec![(x0, edge), (x1, edge)],
                col.mix(0.55).stroke_width(1),
            )))?;
        }
    }
    // Spans over the bands: every other one shaded, a rule at each start, and labels on
    // staggered lines so that neighbouring labels never overprint.
    let line = (y1 - y0) * 18.0 / (340.0 - 24.0 - 42.0);
    for (k, sp) in spans.iter().enumerate() {
        let (a, b) = (sp.from.min(sp.to).max(x0), sp.from.max(sp.to).min(x1));
        if b <= a {
            continue;
        }
        if k % 2 == 0 {
            c.draw_series(std::iter::once(Rectangle::new(
                [(a, y0), (b, y1)],
                MUTED.mix(0.07).filled(),
            )))?;
        }
        c.draw_series(std::iter::once(PathElement::new(
            vec![(a, y0), (a, y1)],
            MUTED.mix(0.5).stroke_width(1),
        )))?;
        c.draw_series(std::iter::once(Text::new(
            format!(" {}", sp.label),
            (a, y1 - line * k as f64),
            (FONT, SMALL).into_font().color(&MUTED),
        )))?;
    }
    if y0 < 0.0 && y1 > 0.0 {
        c.draw_series(std::iter::once(PathElement::new(
            vec![(x0, 0.0), (x1, 0.0)],
            MUTED.stroke_width(1),
        )))?;
    }
    for (i, s) in series.iter().enumerate() {
        let col = SERIES[i % SERIES.len()];
        let mut first = true;
        for run in runs(s) {
            let anno = match s.style {
                SeriesStyle::Line => c.draw_series(LineSeries::new(run, col.stroke_width(2)))?,
                SeriesStyle::Markers => c.draw_series(
                    run.into_iter()
                        .map(move |p| Circle::new(p, 3, col.mix(0.9).filled())),
                )?,
            };
            if first {
                first = false;
                let style = s.style;
                // Legend key: a line for lines, a dot on a faint line for markers.
                anno.label(s.name.clone()).legend(move |(x, y)| {
                    let (line, dot) = match style {
                        SeriesStyle::Line => (col.stroke_width(2), 0),
                        SeriesStyle::Markers => (col.mix(0.0).stroke_width(1), 3),
                    };
                    EmptyElement::at((x, y))
                        + PathElement::new(vec![(0, 0), (18, 0)], line)
                        + Circle::new((9, 0), dot, col.filled())
                });
            }
        }
    }
    if !series.is_empty() || !bands.is_empty() {
        c.configure_series_labels()
            .position(SeriesLabelPosition::UpperRight)
            .background_style(WHITE.mix(0.9))
            .border_style(GRID)
            .label_font((FONT, SMALL).into_font().color(&INK))
            .draw()?;
    }
    root.present()?;
    Ok(())
}

fn is_gamma(label: &str) -> bool {
    label.to_ascii_lowercase().contains("gamma")
}

fn histogram(svg: &mut String, x_label: &str, edges: &[f64], counts: &[u64]) -> DrawResult {
    let (x0, x1) = match (edges.first(), edges.last()) {
        (Some(&a), Some(&b)) if b > a => (a, b),
        _ => (0.0, 1.0),
    };
    let top = counts.iter().copied().max().unwrap_or(0).max(1) as f64 * 1.08;
    let gamma = is_gamma(x_label);
    let root = SVGBackend::with_string(svg, (640, 270)).into_drawing_area();
    root.fill(&WHITE)?;
    let mut c = ChartBuilder::on(&root)
        .margin(12)
        .x_label_area_size(42)
        .y_label_area_size(70)
        .build_cartesian_2d(x0..x1, 0.0..top)?;
    c.configure_mesh()
        .disable_x_mesh()
        .max_light_lines(0)
        .bold_line_style(GRID)
        .axis_style(MUTED)
        .x_desc(x_label)
        .y_desc("Points")
        .x_label_formatter(&|v| tick(*v))
        .y_label_formatter(&|v| format!("{v:.0}"))
        .label_style((FONT, LABEL).into_font().color(&INK))
        .axis_desc_style((FONT, DESC).into_font().color(&INK))
        .draw()?;
    c.draw_series(edges.windows(2).zip(counts).map(|(e, &n)| {
        let fail = gamma && e[0] >= 1.0 - 1e-12;
        let col = if fail { FAIL_BAR } else { PASS_BAR };
        Rectangle::new([(e[0], 0.0), (e[1], n as f64)], col.filled())
    }))?;
    c.draw_series(
        edges
            .windows(2)
            .zip(counts)
            .map(|(e, &n)| Rectangle::new([(e[0], 0.0), (e[1], n as f64)], WHITE.stroke_width(1))),
    )?;
    if gamma && x0 < 1.0 && x1 > 1.0 {
        c.draw_series(std::iter::once(PathElement::new(
            vec![(1.0, 0.0), (1.0, top)],
            INK.stroke_width(1),
        )))?;
        c.draw_series(std::iter::once(Text::new(
            " gamma = 1",
            (1.0, top),
            (FONT, SMALL).into_font().color(&INK),
        )))?;
    }
    root.present()?;
    Ok(())
}

fn lerp(a: RGBColor, b: RGBColor, t: f64) -> RGBColor {
    let t = t.clamp(0.0, 1.0);
    let m = |p: u8, q: u8| (p as f64 + (q as f64 - p as f64) * t).round() as u8;
    RGBColor(m(a.0, b.0), m(a.1, b.1), m(a.2, b.2))
}

/// A map's colour scale: the value range shown and the colour of a value.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Scale {
    /// 0 to 2; hue family changes at 1.
    Gamma,
    /// Diverging, symmetric about zero, clipped at +-limit.
    Diverging { limit: f64 },
    /// Sequential, one hue from light (0) to dark (`max`), for quantities that are never
    /// negative (a dose map).
    Sequential { max: f64 },
}

impl Scale {
    pub fn for_map(quantity: &str, values: &[Option<f64>]) -> Scale {
        if is_gamma(quantity) {
            Scale::Gamma
        } else if quantity == "dose" {
            // The largest value rounded up to two significant digits.
            let max = values.iter().flatten().copied().fold(0.0, f64::max);
            let step = if max > 0.0 {
                10f64.powf(max.log10().floor() - 1.0)
            } else {
                1.0
            };
            Scale::Sequential {
                max: ((max / step).ceil() * step).max(step),
            }
        } else {
            // The 99th percentile of |value|, rounded up, between 1 and 10: a few outliers
            // do not wash out the scale; values beyond it are drawn at the end colour.
            let mut mags: Vec<f64> = values.iter().flatten().map(|v| v.abs()).collect();
            mags.sort_by(f64::total_cmp);
            let p99 = mags
                .get(((mags.len() as f64 * 0.99) as usize).min(mags.len().saturating_sub(1)))
                .copied()
                .unwrap_or(1.0);
            Scale::Diverging {
                limit: p99.ceil().clamp(1.0, 10.0),
            }
        }
    }

    pub fn range(&self) -> (f64, f64) {
        match *self {
            Scale::Gamma => (0.0, 2.0),
            Scale::Diverging { limit } => (-limit, limit),
            Scale::Sequential { max } => (0.0, max),
        }
    }

    pub fn colour(&self, v: f64) -> RGBColor {
        match *self {
            Scale::Gamma => {
                if v <= 1.0 {
                    lerp(RGBColor(0xee, 0xf3, 0xf7), RGBColor(0x7e, 0xa3, 0xc4), v)
                } else {
                    lerp(
                        RGBColor(0xc8, 0x64, 0x2a),
                        RGBColor(0x5e, 0x17, 0x10),
                        v - 1.0,
                    )
                }
            }
            Scale::Sequential { max } => lerp(
                RGBColor(0xf4, 0xf4, 0xf1),
                RGBColor(0x3b, 0x2a, 0x5c),
                v / max,
            ),
            Scale::Diverging { limit } => {
                let t = (v / limit).clamp(-1.0, 1.0);
                let mid = RGBColor(0xf4, 0xf4, 0xf1);
                if t < 0.0 {
                    lerp(mid, RGBColor(0x2c, 0x5f, 0x8e), -t)
                } else {
                    lerp(mid, RGBColor(0xa4, 0x54, 0x1a), t)
                }
            }
        }
    }
}

/// Cell edges from node coordinates: half-way between nodes, half a spacing beyond the ends.
fn edges(c: &[f64]) -> Vec<f64> {
    match c.len() {
        0 => vec![0.0, 1.0],
        1 => vec![c[0] - 0.5, c[0] + 0.5],
        n => {
            let mut e = Vec::with_capacity(n + 1);
            e.push(c[0] - 0.5 * (c[1] - c[0]));
            e.extend(c.windows(2).map(|w| 0.5 * (w[0] + w[1])));
            e.push(c[n - 1] + 0.5 * (c[n - 1] - c[n - 2]));
            e
        }
    }
}

/// Reduce a map to at most `MAX_MAP_CELLS` per axis: (cell edges x, edges y, values), each
/// kept value the one of largest magnitude in its block (undefined when all are).
pub fn reduce(
    x_mm: &[f64],
    y_mm: &[f64],
    values: &[Option<f64>],
) -> (Vec<f64>, Vec<f64>, Vec<Option<f64>>) {
    let (nx, ny) = (x_mm.len(), y_mm.len());
    let (fx, fy) = (
        nx.div_ceil(MAX_MAP_CELLS).max(1),
        ny.div_ceil(MAX_MAP_CELLS).max(1),
    );
    let (ex, ey) = (edges(x_mm), edges(y_mm));
    let (mx, my) = (nx.div_ceil(fx), ny.div_ceil(fy));
    let bx: Vec<f64> = (0..=mx).map(|i| ex[(i * fx).min(nx)]).collect();
    let by: Vec<f64> = (0..=my).map(|j| ey[(j * fy).min(ny)]).collect();
    let mut out = vec![None; mx * my];
    for iy in 0..ny {
        for ix in 0..nx {
            if let Some(v) = values.get(iy * nx + ix).copied().flatten() {
                let slot = &mut out[(iy / fy) * mx + ix / fx];
                if slot.is_none_or(|w: f64| v.abs() > w.abs()) {
                    *slot = Some(v);
                }
            }
        }
    }
    (bx, by, out)
}

#[allow(clippy::too_many_arguments)]
fn map(
    svg: &mut String,
    quantity: &str,
    unit: &str,
    x_label: &str,
    y_label: &str,
    x_mm: &[f64],
    y_mm: &[f64],
    values: &[Option<f64>],
) -> DrawResult {
    let scale = Scale::for_map(quantity, values);
    let (bx, by, cells) = reduce(x_mm, y_mm, values);
    let (x0, x1) = (bx[0], bx[bx.len() - 1]);
    let (y0, y1) = (by[0], by[by.len() - 1]);
    // Equal millimetres on both axes, within a sensible page box.
    let plot_w = 440.0;
    let plot_h = (plot_w * (y1 - y0) / (x1 - x0)).clamp(160.0, 520.0);
    let (w, h) = (plot_w as u32 + 90 + BAR_AREA, plot_h as u32 + 90);
    let root = SVGBackend::with_string(svg, (w, h)).into_drawing_area();
    root.fill(&WHITE)?;
    let (left, right) = root.split_horizontally(w - BAR_AREA);
    let mut c = ChartBuilder::on(&left)
        .margin(12)
        .x_label_area_size(42)
        .y_label_area_size(64)
        .build_cartesian_2d(x0..x1, y0..y1)?;
    c.configure_mesh()
        .disable_mesh()
        .axis_style(MUTED)
        .x_desc(x_label)
        .y_desc(y_label)
        .x_label_formatter(&|v| tick(*v))
        .y_label_formatter(&|v| tick(*v))
        .label_style((FONT, LABEL).into_font().color(&INK))
        .axis_desc_style((FONT, DESC).into_font().color(&INK))
        .draw()?;
    // One rectangle per run of equal colour along a row keeps the SVG small.
    let mx = bx.len() - 1;
    let mut rects = Vec::new();
    for (j, row) in cells.chunks(mx).enumerate() {
        let mut i = 0;
        while i < mx {
            let Some(v) = row[i] else {
                i += 1;
                continue;
            };
            let col = scale.colour(v);
            let mut k = i + 1;
            while k < mx && row[k].map(|w| scale.colour(w)) == Some(col) {
                k += 1;
            }
            rects.push(Rectangle::new(
                [(bx[i], by[j]), (bx[k], by[j + 1])],
                col.filled(),
            ));
            i = k;
        }
    }
    c.draw_series(rects)?;
    colour_bar(&right, scale, quantity, unit)?;
    root.present()?;
    Ok(())
}

fn colour_bar(
    area: &DrawingArea<SVGBackend, Shift>,
    scale: Scale,
    quantity: &str,
    unit: &str,
) -> DrawResult {
    let (lo, hi) = scale.range();
    let mut c = ChartBuilder::on(area)
        .margin_top(12)
        .margin_bottom(74)
        .margin_left(10)
        .margin_right(46)
        .y_label_area_size(0)
        .right_y_label_area_size(48)
        .build_cartesian_2d(0.0..1.0, lo..hi)?;
    c.configure_mesh()
        .disable_mesh()
        .disable_x_axis()
        .axis_style(MUTED)
        .y_labels(9)
        .y_label_formatter(&|v| tick(*v))
        .label_style((FONT, SMALL).into_font().color(&INK))
        .draw()?;
    let steps = 96;
    c.draw_series((0..steps).map(|i| {
        let a = lo + (hi - lo) * i as f64 / steps as f64;
        let b = lo + (hi - lo) * (i + 1) as f64 / steps as f64;
        Rectangle::new([(0.0, a), (1.0, b)], scale.colour(0.5 * (a + b)).filled())
    }))?;
    // Quantity and unit under the bar, one per line.
    let bottom = area.dim_in_pixel().1 as i32;
    area.draw(&Text::new(
        quantity.to_string(),
        (10, bottom - 62),
        (FONT, SMALL).into_font().color(&INK),
    ))?;
    if !unit.is_empty() {
        area.draw(&Text::new(
            format!("({unit})"),
            (10, bottom - 44),
            (FONT, SMALL).into_font().color(&INK),
        ))?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gamma_scale_darkens_monotonically_and_changes_hue_at_one() {
        // Design rule (common practice, no source): readable in greyscale means luminance
        // falls monotonically with gamma. Rec. 709 luma weights.
        let luma = |c: RGBColor| 0.2126 * c.0 as f64 + 0.7152 * c.1 as f64 + 0.0722 * c.2 as f64;
        let s = Scale::Gamma;
        let mut last = f64::INFINITY;
        for i in 0..=40 {
            let l = luma(s.colour(i as f64 * 0.05));
            assert!(l <= last + 1e-9, "luma rises at gamma {}", i as f64 * 0.05);
            last = l;
        }
        let (below, above) = (s.colour(1.0), s.colour(1.0001));
        assert!(below.2 > below.0, "passing end is blue");
        assert!(above.0 > above.2, "failing start is warm");
    }

    #[test]
    fn dose_maps_use_a_sequential_scale_from_zero_that_darkens_with_dose() {
        // Design rule (common practice, no source): a dose is never negative, so its map runs
        // from zero, and reads in greyscale (luma falls as dose rises). Rec. 709 luma weights.
        let luma = |c: RGBColor| 0.2126 * c.0 as f64 + 0.7152 * c.1 as f64 + 0.0722 * c.2 as f64;
        let s = Scale::for_map("dose", &[Some(0.1), Some(2.093), None]);
        assert_eq!(s, Scale::Sequential { max: 2.1 });
        assert_eq!(s.range(), (0.0, 2.1));
        let mut last = f64::INFINITY;
        for i in 0..=21 {
            let l = luma(s.colour(i as f64 * 0.1));
            assert!(l < last, "luma does not fall at {} Gy", i as f64 * 0.1);
            last = l;
        }
        assert!(matches!(
            Scale::for_map("dose difference", &[Some(-0.5), Some(0.7)]),
            Scale::Diverging { .. }
        ));
    }

    #[test]
    fn map_reduction_keeps_the_most_extreme_value_of_each_block() {
        // 300 x 1 map with one failing point: reduced 2:1, the block holding it keeps it.
        let xs: Vec<f64> = (0..300).map(f64::from).collect();
        let mut v = vec![Some(0.2); 300];
        v[201] = Some(1.7);
        v[10] = None;
        v[11] = None;
        let (bx, by, cells) = reduce(&xs, &[0.0], &v);
        assert_eq!(cells.len(), 150);
        assert_eq!(bx.len(), 151);
        assert_eq!(by, vec![-0.5, 0.5]);
        assert_eq!(cells[100], Some(1.7));
        assert_eq!(cells[5], None, "a block with no value stays undefined");
        assert!((bx[0] + 0.5).abs() < 1e-12 && (bx[150] - 299.5).abs() < 1e-12);
    }

    #[test]
    fn long_series_are_thinned_for_drawing_keeping_every_extreme() {
        // A million-point ramp with one spike and one dip: the thinned run keeps both, the
        // first and last points, its order, and at most MAX_DRAWN points.
        let n = 1_000_000;
        let mut run: Vec<(f64, f64)> = (0..n).map(|i| (i as f64, i as f64 * 1e-6)).collect();
        run[123_457].1 = 50.0;
        run[876_543].1 = -50.0;
        let t = thin(run.clone());
        assert!(t.len() <= MAX_DRAWN, "{}", t.len());
        assert_eq!(t.first(), run.first());
        assert_eq!(t.last(), run.last());
        assert!(t.contains(&(123_457.0, 50.0)) && t.contains(&(876_543.0, -50.0)));
        assert!(t.windows(2).all(|w| w[0].0 < w[1].0), "order kept");
        // Short runs are drawn whole.
        let short: Vec<(f64, f64)> = (0..MAX_DRAWN).map(|i| (i as f64, 1.0)).collect();
        assert_eq!(thin(short.clone()), short);
    }

    #[test]
    fn ticks_are_short_and_never_negative_zero() {
        assert_eq!(tick(-0.0001), "0");
        assert_eq!(tick(2.5), "2.5");
        assert_eq!(tick(100.0), "100");
        assert_eq!(tick(-12.125), "-12.125");
    }

    #[test]
    fn every_figure_kind_draws_with_its_labels_as_text() {
        let figs = [
            Figure::Chart {
                title: "t".into(),
                x_label: "Depth (mm)".into(),
                y_label: "Dose (%)".into(),
                series: vec![Series {
                    name: "measured".into(),
                    style: SeriesStyle::Markers,
                    x: vec![0.0, 1.0, f64::NAN, 3.0],
                    y: vec![50.0, 100.0, 1.0, 80.0],
                }],
                bands: vec![Band {
                    label: "tolerance".into(),
                    low: -2.0,
                    high: 2.0,
                }],
                spans: vec![Span {
                    label: "build-up".into(),
                    from: 0.0,
                    to: 1.0,
                }],
            },
            Figure::Histogram {
                title: "h".into(),
                x_label: "Gamma".into(),
                edges: vec![0.0, 0.5, 1.0, 1.5],
                counts: vec![10, 5, 1],
            },
            Figure::Map {
                title: "m".into(),
                quantity: "gamma".into(),
                unit: String::new(),
                x_label: "X (mm)".into(),
                y_label: "Y (mm)".into(),
                x_mm: vec![0.0, 1.0, 2.0],
                y_mm: vec![0.0, 1.0],
                values: vec![Some(0.1), None, Some(1.5), Some(0.9), Some(0.0), Some(2.5)],
            },
        ];
        for (f, want) in figs.iter().zip(["Depth (mm)", "gamma = 1", "Y (mm)"]) {
            let svg = draw(f).expect("draw");
            assert!(svg.starts_with("<svg"), "{svg:.40}");
            assert!(svg.contains(want), "{} lacks {want}", kind(f));
        }
    }
}
