//! The error-against-step picture: which rows get a step sweep and what it
//! costs, the sweep's numbers against Taylor's theorem, and the SVG read
//! back as XML, point by point, through its axes.

use plumbline::audit::{StepSweeps, SWEEP_FORWARDS};
use plumbline::env::Environment;
use plumbline::prelude::*;
use plumbline::render::{step_picture, PICTURE_MARGIN};
use plumbline::report::StepSweep;
use plumbline::{Error, Row};

/// Frost damage of a bud grows like y = eˣ in its chill score x (demo
/// model). `factor` scales the backward: 1 is right, 1.01 a planted bug.
struct BudDamage {
    factor: f64,
}

impl Layer for BudDamage {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("chill", "bud")
            .output("damage", "bud")
    }
    fn backward(&self, a: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
        let x = a.input(0);
        let dx = Tensor::from_fn(x.shape().to_vec(), |i| self.factor * x[i].exp() * g[0][i]);
        Gradients::from(vec![dx])
    }
}

impl GenericForward for BudDamage {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        vec![a.input(0).map(|x| x.exp())]
    }
}

/// Frost hardiness y = ln x of a bud's sugar content x (demo model), with
/// the backward's 1/x planted as 1.01/x. The forward refuses x ≤ 0 with a
/// panic, as a layer may: the sweep's widest steps leave its domain.
struct Hardiness;

impl Layer for Hardiness {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("sugar", "bud")
            .output("hardiness", "bud")
    }
    fn backward(&self, a: &Args<f64>, g: &[Tensor<f64>]) -> Gradients<f64> {
        let x = a.input(0);
        Gradients::from(vec![Tensor::from_fn(x.shape().to_vec(), |i| {
            1.01 / x[i] * g[0][i]
        })])
    }
}

impl GenericForward for Hardiness {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        vec![a.input(0).map(|x| {
            assert!(x > T::zero(), "sugar content must be positive");
            x.ln()
        })]
    }
}

fn one(x: f64) -> Args<f64> {
    Args::new(vec![Tensor::new(vec![1], vec![x]).unwrap()], vec![])
}

fn sweep_of(row: &Row) -> &StepSweep {
    row.step_sweep
        .as_ref()
        .unwrap_or_else(|| panic!("`{}` has no sweep", row.name))
}

#[test]
fn failing_rows_get_a_sweep_passing_rows_only_when_asked() {
    let right = BudDamage { factor: 1.0 };
    let wrong = BudDamage { factor: 1.01 };
    let args = one(1.0);

    let quiet = Audit::new().run(&right, &args).unwrap();
    quiet.assert_passed();
    assert!(quiet.rows[0].step_sweep.is_none());
    let asked = Audit::new()
        .step_sweeps(StepSweeps::All)
        .run(&right, &args)
        .unwrap();
    let sweep = sweep_of(&asked.rows[0]);
    assert_eq!(sweep.points.len(), SWEEP_FORWARDS / 2);
    assert_eq!(sweep.forward_evals, SWEEP_FORWARDS);
    // The whole extra cost of a sweep is its forwards.
    assert_eq!(asked.forward_evals, quiet.forward_evals + SWEEP_FORWARDS);

    let failing = Audit::new().run(&wrong, &args).unwrap();
    assert!(!failing.passed());
    let sweep = sweep_of(&failing.rows[0]);
    let worst = failing.rows[0].worst.as_ref().unwrap();
    assert_eq!(
        (sweep.analytic, sweep.reference, sweep.bound),
        (worst.analytic, worst.numeric, worst.bound)
    );
    assert_eq!(sweep.x, 1.0);
    let off = Audit::new()
        .step_sweeps(StepSweeps::Off)
        .run(&wrong, &args)
        .unwrap();
    assert!(off.rows[0].step_sweep.is_none());
    assert_eq!(off.forward_evals + SWEEP_FORWARDS, failing.forward_evals);
}

/// Taylor's theorem: D(h) = (f(x+h) − f(x−h))/2h = f′ + h²/6·f‴ + O(h⁴)
/// (common practice). For f = w·eˣ every derivative is w·eˣ (eˣ is its
/// own derivative: elementary calculus), so at the steps where rounding
/// is negligible |D(h) − f′| = h²/6·|f′|·(1 + h²/20 + …): within 0.05% at
/// h = 0.1, the largest step. The reference here is the complex step,
/// exact to a few ulps, and w the audit's seeded upstream weight.
#[test]
fn large_steps_follow_the_truncation_term_of_taylors_theorem() {
    let report = Audit::new()
        .run(&BudDamage { factor: 1.01 }, &one(1.0))
        .unwrap();
    let sweep = sweep_of(&report.rows[0]);
    let f1 = sweep.reference;
    assert!(f1 != 0.0 && f1.is_finite());
    // Above 1e-4 rounding, about ε·|f|/h ≈ 1e-12, is below 0.1% of the
    // truncation.
    let large: Vec<_> = sweep.points.iter().filter(|p| p.step >= 1e-4).collect();
    assert!(large.len() >= 5, "{sweep:?}");
    for p in large {
        let predicted = p.step * p.step / 6.0 * f1.abs();
        let measured = (p.numeric - f1).abs();
        let ratio = measured / predicted;
        assert!(
            (ratio - 1.0).abs() < 0.01,
            "h = {:e}: |D − f′| = {measured:e}, h²/6·|f‴| = {predicted:e}",
            p.step
        );
    }
}

/// The total error h²/6·|f‴| + ε·|f|/h is least at h = (3ε·|f|/|f‴|)^(1/3)
/// (common practice), which for f = w·eˣ is (3ε)^(1/3) ≈ 8.7e-6. Rounding
/// errors scatter, so the sweep's smallest distance lands near it, not on
/// it: within a factor of 10, with both arms of the V at least a thousand
/// times higher.
#[test]
fn the_v_bottoms_out_near_the_classic_step() {
    let report = Audit::new()
        .run(&BudDamage { factor: 1.01 }, &one(1.0))
        .unwrap();
    let sweep = sweep_of(&report.rows[0]);
    let distance: Vec<f64> = sweep
        .points
        .iter()
        .map(|p| (p.numeric - sweep.reference).abs())
        .collect();
    let (k, &least) = distance
        .iter()
        .enumerate()
        .min_by(|a, b| a.1.total_cmp(b.1))
        .unwrap();
    let classic = (3.0 * f64::EPSILON).cbrt();
    let best = sweep.points[k].step;
    assert!(
        best > classic / 10.0 && best < classic * 10.0,
        "smallest distance {least:e} at h = {best:e}; classic step {classic:e}"
    );
    assert!(distance[0] > 1e3 * least, "{distance:?}");
    assert!(distance[distance.len() - 1] > 1e3 * least, "{distance:?}");
    // The backward's 1% shows at every step: never within the bound.
    for p in &sweep.points {
        assert!((p.numeric - sweep.analytic).abs() > sweep.bound, "{p:?}");
    }
}

/// The picture's polylines: the `points` attribute of every `polyline`
/// stroked in `color`, as pixel pairs.
fn polylines(doc: &roxmltree::Document<'_>, color: &str) -> Vec<Vec<(f64, f64)>> {
    doc.descendants()
        .filter(|n| n.has_tag_name("polyline") && n.attribute("stroke") == Some(color))
        .map(|n| {
            n.attribute("points")
                .unwrap_or_default()
                .split_whitespace()
                .map(|pair| {
                    let (x, y) = pair.split_once(',').expect("x,y");
                    (x.parse().unwrap(), y.parse().unwrap())
                })
                .collect()
        })
        .collect()
}

/// The longest polyline of a colour (the legend's samples have two points).
fn series(doc: &roxmltree::Document<'_>, color: &str) -> Vec<(f64, f64)> {
    polylines(doc, color)
        .into_iter()
        .max_by_key(Vec::len)
        .unwrap_or_default()
}

/// Pixel bounds of the plotting area: the frame, the one unfilled `rect`
/// stroked `#A0A0A0` (see `step_picture`).
fn frame(doc: &roxmltree::Document<'_>) -> (f64, f64, f64, f64) {
    let frames: Vec<_> = doc
        .descendants()
        .filter(|n| {
            n.has_tag_name("rect")
                && n.attribute("fill") == Some("none")
                && n.attribute("stroke") == Some("#A0A0A0")
        })
        .collect();
    assert_eq!(frames.len(), 1);
    let num = |k: &str| frames[0].attribute(k).unwrap().parse::<f64>().unwrap();
    let (x, y, w, h) = (num("x"), num("y"), num("width"), num("height"));
    (x, x + w, y, y + h)
}

#[test]
fn the_picture_is_valid_svg_whose_points_are_the_sweep() {
    let report = Audit::new()
        .run(&BudDamage { factor: 1.01 }, &one(1.0))
        .unwrap();
    let row = &report.rows[0];
    let sweep = sweep_of(row);
    let svg = step_picture(row).expect("a failing row has a picture");
    let doc = roxmltree::Document::parse(&svg).expect("well-formed XML");
    let root = doc.root_element();
    assert!(root.has_tag_name("svg"), "{}", root.tag_name().name());
    assert!(svg.contains("chill"), "the tensor's name is in the title");

    let to_analytic: Vec<f64> = (sweep.points.iter())
        .map(|p| (p.numeric - sweep.analytic).abs())
        .collect();
    let to_reference: Vec<f64> = (sweep.points.iter())
        .map(|p| (p.numeric - sweep.reference).abs())
        .collect();
    let red = series(&doc, "#C0392B");
    let blue = series(&doc, "#1F5FBF");
    // Every distance here is finite and above 0: one point per step.
    assert!(to_reference.iter().chain(&to_analytic).all(|d| *d > 0.0));
    assert_eq!(red.len(), sweep.points.len());
    assert_eq!(blue.len(), sweep.points.len());

    // The axes, in log10: the extreme values drawn (the points, the bound,
    // the audit's own comparison at the complex step's step) and the
    // documented margin.
    let log = |v: &f64| v.log10();
    let steps: Vec<f64> = sweep.points.iter().map(|p| log(&p.step)).collect();
    let gap = (sweep.analytic - sweep.reference).abs();
    let xs = steps.iter().copied().chain([log(&sweep.chosen_step)]);
    let ys =
        (to_analytic.iter().chain(&to_reference).map(log)).chain([log(&sweep.bound), log(&gap)]);
    let x0 = xs.clone().fold(f64::INFINITY, f64::min) - PICTURE_MARGIN;
    let x1 = xs.fold(f64::NEG_INFINITY, f64::max) + PICTURE_MARGIN;
    let y0 = ys.clone().fold(f64::INFINITY, f64::min) - PICTURE_MARGIN;
    let y1 = ys.fold(f64::NEG_INFINITY, f64::max) + PICTURE_MARGIN;
    // The complex step (1e-20) is the leftmost value drawn.
    assert_eq!(x0 + PICTURE_MARGIN, -20.0);

    let (left, right, top, bottom) = frame(&doc);
    let px = |v: f64| left + (v - x0) / (x1 - x0) * (right - left);
    let py = |v: f64| bottom - (v - y0) / (y1 - y0) * (bottom - top);
    for (line, distances) in [(&red, &to_analytic), (&blue, &to_reference)] {
        for ((&(x, y), &h), d) in line.iter().zip(&steps).zip(distances) {
            // Pixels are whole numbers: half a pixel of rounding each way.
            assert!((x - px(h)).abs() <= 1.0, "x {x} for h = 1e{h}: {}", px(h));
            assert!(
                (y - py(log(d))).abs() <= 1.0,
                "y {y} for {d:e}: {}",
                py(log(d))
            );
        }
    }
    // The extreme values sit the margin inside the frame.
    let inset_x = PICTURE_MARGIN / (x1 - x0) * (right - left);
    assert!((blue[blue.len() - 1].0 - (right - inset_x)).abs() <= 1.0);
    let inset_y = PICTURE_MARGIN / (y1 - y0) * (bottom - top);
    let highest = red
        .iter()
        .chain(&blue)
        .map(|p| p.1)
        .fold(f64::INFINITY, f64::min);
    let top_value = (to_analytic.iter().chain(&to_reference).map(log))
        .chain([log(&gap)])
        .fold(f64::NEG_INFINITY, f64::max);
    if top_value < y1 - PICTURE_MARGIN {
        // The audit's own comparison is higher than any point of the sweep.
        assert!(highest > top + inset_y);
    } else {
        assert!((highest - (top + inset_y)).abs() <= 1.0);
    }
}

#[test]
fn a_forward_that_leaves_its_domain_breaks_the_line_but_not_the_audit() {
    // Steps reach 0.1, past x = 0.05: ln is not defined there, and the
    // forward panics; those points are NaN and the audit still reports.
    let report = Audit::new().run(&Hardiness, &one(0.05)).unwrap();
    let row = &report.rows[0];
    let sweep = sweep_of(row);
    for p in &sweep.points {
        assert_eq!(p.numeric.is_nan(), p.step >= 0.05, "{p:?}");
    }
    let drawn = sweep
        .points
        .iter()
        .filter(|p| p.numeric.is_finite())
        .count();
    assert!(drawn < sweep.points.len());
    let svg = step_picture(row).unwrap();
    let doc = roxmltree::Document::parse(&svg).unwrap();
    assert_eq!(series(&doc, "#C0392B").len(), drawn);
}

#[test]
fn the_report_files_hold_the_sweep_and_the_markdown_links_the_picture() {
    let dir = std::env::temp_dir().join(format!("plumbline-picture-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    let report = Audit::new()
        .name("bud damage")
        .run(&BudDamage { factor: 1.01 }, &one(1.0))
        .unwrap();
    let paths = plumbline::render::write_report(&dir, &report).unwrap();
    let names: Vec<String> = paths
        .iter()
        .map(|p| p.file_name().unwrap().to_string_lossy().into_owned())
        .collect();
    let stem = "the_report_files_hold_the_sweep_and_the_markdown_links_the_picture--bud_damage";
    let svg_name = format!("{stem}--chill.svg");
    assert_eq!(
        names,
        [
            format!("{stem}.json"),
            format!("{stem}.md"),
            svg_name.clone()
        ]
    );
    let read = |name: &str| std::fs::read_to_string(dir.join(name)).unwrap();
    let md = read(&format!("{stem}.md"));
    assert!(
        md.contains(&format!("- `chill`: [{svg_name}]({svg_name})")),
        "{md}"
    );
    roxmltree::Document::parse(&read(&svg_name)).unwrap();
    // The JSON reads back into the same report, sweep included (compared
    // as JSON: the diagnosis holds a NaN correlation, and NaN ≠ NaN).
    let json = read(&format!("{stem}.json"));
    let back: Report = serde_json::from_str(&json).unwrap();
    assert_eq!(plumbline::render::json(&back), json);
    assert_eq!(back.rows[0].step_sweep, report.rows[0].step_sweep);
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn step_sweeps_come_from_the_environment_and_code_wins() {
    let lookup = |value: &'static str| {
        move |name: &str| (name == "PLUMBLINE_STEP_SWEEPS").then(|| value.to_string())
    };
    let env = Environment::from_lookup(lookup("all")).unwrap();
    assert_eq!(env.step_sweeps, Some(StepSweeps::All));
    let audit = env.audit(|a| a).unwrap();
    assert!(format!("{audit:?}").contains("step_sweeps: All"));
    let audit = env.audit(|a| a.step_sweeps(StepSweeps::Off)).unwrap();
    assert!(format!("{audit:?}").contains("step_sweeps: Off"));
    let report = env
        .audit(|a| a)
        .unwrap()
        .run(&BudDamage { factor: 1.0 }, &one(0.5))
        .unwrap();
    assert!(report.rows[0].step_sweep.is_some());
    match Environment::from_lookup(lookup("some")).unwrap_err() {
        Error::Setting { setting, .. } => assert_eq!(setting, "PLUMBLINE_STEP_SWEEPS"),
        other => panic!("{other:?}"),
    }
}
