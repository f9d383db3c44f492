//! The error-against-step picture of a row's [`StepSweep`], drawn as SVG
//! with plotters (feature `pictures`).

use plotters::backend::SVGBackend;
use plotters::prelude::*;

use crate::format::{err, num};
use crate::report::{Row, StepSweep};
use crate::scheme::Scheme;

/// Width and height of the picture, in pixels.
const PICTURE_SIZE: (u32, u32) = (760, 500);

/// The distances from the backward's value: red, `#C0392B`.
const ANALYTIC_COLOR: RGBColor = RGBColor(192, 57, 43);
/// The distances from the reference: blue, `#1F5FBF`.
const REFERENCE_COLOR: RGBColor = RGBColor(31, 95, 191);
/// The bound's horizontal line: grey, `#6E6E6E`.
const BOUND_COLOR: RGBColor = RGBColor(110, 110, 110);
/// The frame around the plotting area, an unfilled `rect`: `#A0A0A0`.
const FRAME_COLOR: RGBColor = RGBColor(160, 160, 160);

/// The error-against-step picture of a row, as an SVG document; `None`
/// when the row has no [`StepSweep`] or nothing in it can be drawn.
///
/// Log-log axes: the step h along x, a distance along y. For each central
/// difference D(h) of the sweep it draws |D(h) − analytic| (the backward's
/// value; red, stroke `#C0392B`) and |D(h) − reference| (blue, `#1F5FBF`),
/// each as a `polyline` through its points (with a dot at each); the row's
/// bound as a dashed horizontal line across the whole plotting area (grey,
/// `#6E6E6E`); and the audit's own comparison, |analytic − reference| at
/// the scheme's step (the complex step's imaginary step), as a black
/// triangle. The plotting area has a frame, an unfilled `rect` (`#A0A0A0`). The reference's distances draw
/// the V of truncation error (falling with the step) and rounding error
/// (rising as it shrinks); a backward that is right follows the V down to
/// the bound, a wrong one stays above it at every step.
///
/// The axes reach [`PICTURE_MARGIN`] decades beyond the extreme values
/// drawn (a lone value gets a decade either side). Distances that are 0 or
/// not finite have no place on a log axis and are left out (a polyline
/// breaks there). The axes are drawn as log10 of the values on linear
/// axes, labelled at whole decades (`1e-8`): every point's pixel
/// coordinates are an affine function of log10 of its step and distance.
///
/// ```
/// use plumbline::audit::StepSweeps;
/// use plumbline::prelude::*;
///
/// /// Frost-night cooling per station, y = x²; the backward forgets the 2.
/// struct Cooling;
/// impl Layer for Cooling {
///     type Real = f64;
///     fn signature(&self) -> Signature { Signature::new().input("x", "station").output("y", "station") }
///     fn backward(&self, a: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
///         let x = a.input(0);
///         Gradients::from(vec![Tensor::from_fn(x.shape().to_vec(), |i| x[i] * g[0][i])])
///     }
/// }
/// impl GenericForward for Cooling {
///     fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
///         vec![a.input(0).map(|x| x * x)]
///     }
/// }
/// let args = Args::new(vec![Tensor::new(vec![2], vec![0.5, -1.5])?], vec![]);
/// let report = Audit::new().run(&Cooling, &args)?;
/// let svg = plumbline::render::step_picture(&report.rows[0]).unwrap();
/// assert!(svg.starts_with("<svg") && svg.contains("<polyline"));
/// # Ok::<(), plumbline::Error>(())
/// ```
pub fn step_picture(row: &Row) -> Option<String> {
    let sweep = row.step_sweep.as_ref()?;
    let curves = Curves::of(sweep);
    let (x_range, y_range) = curves.ranges()?;
    let mut svg = String::new();
    draw(&mut svg, row, sweep, &curves, x_range, y_range).ok()?;
    Some(svg)
}

/// Decades of room between the extreme values drawn and the frame, on each
/// side of both axes.
pub const PICTURE_MARGIN: f64 = 0.4;

/// What the picture draws, as log10 of the values (all finite).
struct Curves {
    /// |D(h) − analytic|, in runs of consecutive drawable points.
    analytic: Vec<Vec<(f64, f64)>>,
    /// |D(h) − reference|, likewise.
    reference: Vec<Vec<(f64, f64)>>,
    bound: Option<f64>,
    /// (scheme's step, |analytic − reference|).
    chosen: Option<(f64, f64)>,
}

fn drawable(v: f64) -> bool {
    v.is_finite() && v > 0.0
}

/// The points (h, |D(h) − target|), split where one cannot be drawn.
fn runs(sweep: &StepSweep, target: f64) -> Vec<Vec<(f64, f64)>> {
    let mut out: Vec<Vec<(f64, f64)>> = vec![Vec::new()];
    for p in &sweep.points {
        let d = (p.numeric - target).abs();
        if drawable(p.step) && drawable(d) {
            if let Some(run) = out.last_mut() {
                run.push((p.step.log10(), d.log10()));
            }
        } else if out.last().is_some_and(|r| !r.is_empty()) {
            out.push(Vec::new());
        }
    }
    out.retain(|r| !r.is_empty());
    out
}

impl Curves {
    fn of(sweep: &StepSweep) -> Curves {
        let gap = (sweep.analytic - sweep.reference).abs();
        Curves {
            analytic: runs(sweep, sweep.analytic),
            reference: runs(sweep, sweep.reference),
            bound: drawable(sweep.bound).then(|| sweep.bound.log10()),
            chosen: (drawable(sweep.chosen_step) && drawable(gap))
                .then(|| (sweep.chosen_step.log10(), gap.log10())),
        }
    }

    /// The axes' ranges: the smallest and largest x and y drawn, widened by
    /// the margin (by a decade when they coincide); `None` when there is
    /// nothing to draw.
    fn ranges(&self) -> Option<((f64, f64), (f64, f64))> {
        let points = self
            .analytic
            .iter()
            .chain(&self.reference)
            .flatten()
            .copied()
            .chain(self.chosen);
        let (mut x, mut y) = (None::<(f64, f64)>, None::<(f64, f64)>);
        let widen =
            |r: Option<(f64, f64)>, v: f64| Some(r.map_or((v, v), |(a, b)| (a.min(v), b.max(v))));
        for (px, py) in points {
            x = widen(x, px);
            y = widen(y, py);
        }
        let (x, mut y) = (x?, y?);
        if let Some(b) = self.bound {
            y = (y.0.min(b), y.1.max(b));
        }
        let open = |(a, b): (f64, f64)| {
            let pad = if b > a { PICTURE_MARGIN } else { 1.0 };
            (a - pad, b + pad)
        };
        Some((open(x), open(y)))
    }
}

type Drawn = Result<(), Box<dyn std::error::Error>>;

/// The label of a tick at log10 value `v`: `1e-8` at whole decades, none
/// between them.
fn decade(v: &f64) -> String {
    let k = v.round();
    if (v - k).abs() < 1e-9 {
        format!("1e{k}")
    } else {
        String::new()
    }
}

fn draw(
    svg: &mut String,
    row: &Row,
    sweep: &StepSweep,
    curves: &Curves,
    (x0, x1): (f64, f64),
    (y0, y1): (f64, f64),
) -> Drawn {
    let root = SVGBackend::with_string(svg, PICTURE_SIZE).into_drawing_area();
    root.fill(&WHITE)?;
    let (upper, lower) = root.split_vertically(PICTURE_SIZE.1 - LEGEND_HEIGHT);
    let title = format!(
        "`{}` {} (x = {}): central differences against step",
        row.name,
        sweep.index,
        num(sweep.x)
    );
    let mut chart = ChartBuilder::on(&upper)
        .caption(title, ("sans-serif", 17))
        .margin(14)
        .x_label_area_size(46)
        .y_label_area_size(70)
        .build_cartesian_2d(x0..x1, y0..y1)?;
    chart
        .configure_mesh()
        .x_desc("step h (half-width of the central difference)")
        .y_desc("distance |D(h) − value|")
        .x_label_formatter(&decade)
        .y_label_formatter(&decade)
        .light_line_style(TRANSPARENT)
        .bold_line_style(RGBColor(232, 232, 232))
        .draw()?;
    chart.draw_series(std::iter::once(Rectangle::new(
        [(x0, y0), (x1, y1)],
        FRAME_COLOR.stroke_width(1),
    )))?;
    for (runs, color) in [
        (&curves.analytic, ANALYTIC_COLOR),
        (&curves.reference, REFERENCE_COLOR),
    ] {
        for run in runs {
            chart.draw_series(LineSeries::new(run.iter().copied(), color.stroke_width(2)))?;
            chart.draw_series(run.iter().map(|&p| Circle::new(p, 3, color.filled())))?;
        }
    }
    if let Some(b) = curves.bound {
        chart.draw_series(DashedLineSeries::new(
            [(x0, b), (x1, b)],
            8,
            5,
            BOUND_COLOR.stroke_width(2),
        ))?;
    }
    if let Some(p) = curves.chosen {
        chart.draw_series(std::iter::once(TriangleMarker::new(p, 7, BLACK.filled())))?;
    }
    legend(&lower, row, sweep)
}

/// Height of the legend strip below the chart, in pixels.
const LEGEND_HEIGHT: u32 = 52;

/// The legend, in two columns below the chart (inside the chart it would
/// cover the V somewhere, whatever corner it took).
fn legend(
    area: &DrawingArea<SVGBackend<'_>, plotters::coord::Shift>,
    row: &Row,
    sweep: &StepSweep,
) -> Drawn {
    let font = ("sans-serif", 13).into_font().color(&BLACK);
    let gap = (sweep.analytic - sweep.reference).abs();
    let entries = [
        "|D(h) − backward's value|".to_string(),
        format!("|D(h) − {} reference|", row.scheme),
        format!("bound {}", err(sweep.bound)),
        format!(
            "the audit's point: {} apart, {}step {}",
            err(gap),
            if row.scheme == Scheme::ComplexStep {
                "imaginary "
            } else {
                ""
            },
            err(sweep.chosen_step)
        ),
    ];
    for (k, text) in entries.iter().enumerate() {
        let x = if k % 2 == 0 { 84 } else { 330 };
        let y = 10 + 22 * (k / 2) as i32;
        let (sample, label) = ((x, y + 7), (x + 30, y));
        match k {
            0 | 1 => {
                let color = if k == 0 {
                    ANALYTIC_COLOR
                } else {
                    REFERENCE_COLOR
                };
                area.draw(&PathElement::new(
                    [sample, (sample.0 + 22, sample.1)],
                    color.stroke_width(2),
                ))?;
            }
            2 => {
                for d in [0, 14] {
                    area.draw(&PathElement::new(
                        [(sample.0 + d, sample.1), (sample.0 + d + 8, sample.1)],
                        BOUND_COLOR.stroke_width(2),
                    ))?;
                }
            }
            _ => area.draw(&TriangleMarker::new(
                (sample.0 + 11, sample.1),
                6,
                BLACK.filled(),
            ))?,
        }
        area.draw(&Text::new(text.as_str(), label, font.clone()))?;
    }
    Ok(())
}
