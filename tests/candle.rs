//! The candle adapter (feature `candle`): custom ops of the frost model
//! audited through their own `bwd`, planted bugs named, missing gradients
//! and op errors reported, `f32` ops without false alarms over random
//! readings, functions audited through candle's autograd, and conversions.
#![cfg(feature = "candle")]

use candle_core::cpu_backend::{binary_map, unary_map};
use candle_core::{CpuStorage, CustomOp1, CustomOp2, CustomOp3, DType, Device, Layout, Shape};
use plumbline::candle::{AutogradLayer, CustomOp1Layer, CustomOp2Layer, CustomOp3Layer};
use plumbline::{
    Args, Audit, Diagnosis, Error, Forward, Report, Scalar, Signature, Tensor, Verdict,
};
use rand::{RngExt, SeedableRng};

type CT = candle_core::Tensor;
type CResult<T> = candle_core::Result<T>;

/// Magnus coefficients over water (D. Sonntag, Z. Meteorol. 40, 1990;
/// quoted from memory; any smooth formula would do for these tests).
const B: f64 = 17.62;
const C: f64 = 243.12;

/// Upper bound of the chill band in °C (45 °F; common practice in chill
/// models), and the width of the soft edges.
const CHILL_TOP: f64 = 7.2;
const CHILL_WIDTH: f64 = 0.5;

fn report_row<'a>(report: &'a Report, name: &str) -> &'a plumbline::Row {
    report
        .row(name)
        .unwrap_or_else(|| panic!("no row `{name}` in\n{report}"))
}

// ---------------------------------------------------------------- ops

/// Soft chill-hour weight of an hourly temperature: ≈ 1 inside
/// (0, 7.2) °C, ≈ 0 outside, y = σ(T/w)·σ((7.2 − T)/w).
struct ChillHours {
    /// PLANTED BUG when true: the chain rule's 1/w is left out.
    forgets_width: bool,
}

fn sigmoid<T: Scalar>(x: T) -> T {
    T::one() / (T::one() + (-x).exp())
}

fn chill<T: Scalar>(t: T) -> T {
    let w = T::from(CHILL_WIDTH).unwrap();
    sigmoid(t / w) * sigmoid((T::from(CHILL_TOP).unwrap() - t) / w)
}

impl CustomOp1 for ChillHours {
    fn name(&self) -> &'static str {
        "chill_hours"
    }
    fn cpu_fwd(&self, s: &CpuStorage, l: &Layout) -> CResult<(CpuStorage, Shape)> {
        let out = match s {
            CpuStorage::F32(t) => CpuStorage::F32(unary_map(t, l, chill::<f32>)),
            CpuStorage::F64(t) => CpuStorage::F64(unary_map(t, l, chill::<f64>)),
            _ => candle_core::bail!("chill_hours: f32 or f64 temperatures"),
        };
        Ok((out, l.shape().clone()))
    }
    fn bwd(&self, t: &CT, _res: &CT, grad_res: &CT) -> CResult<Option<CT>> {
        // y = σ(a)σ(b), a = T/w, b = (7.2 − T)/w:
        // dy/dT = [σ(a)(1 − σ(a))σ(b) − σ(a)σ(b)(1 − σ(b))]/w.
        let sa = candle_core::Tensor::ones_like(t)?
            .div(&(t.affine(-1.0 / CHILL_WIDTH, 0.0)?.exp()? + 1.0)?)?;
        let sb = candle_core::Tensor::ones_like(t)?.div(
            &(t.affine(1.0 / CHILL_WIDTH, -CHILL_TOP / CHILL_WIDTH)?
                .exp()?
                + 1.0)?,
        )?;
        let y = sa.mul(&sb)?;
        let slope = y.mul(&(sa.affine(-1.0, 1.0)? - sb.affine(-1.0, 1.0)?)?)?;
        let scale = if self.forgets_width {
            1.0
        } else {
            1.0 / CHILL_WIDTH
        };
        Ok(Some((slope * scale)?.mul(grad_res)?))
    }
}

/// What the dew-point op's `bwd` does.
#[derive(Clone, Copy, PartialEq, Debug)]
enum SpreadBwd {
    Correct,
    /// PLANTED BUG: ∂spread/∂RH without its minus sign.
    HumiditySignLost,
    /// No gradient for the humidity.
    NoHumidity,
    /// `bwd` fails.
    Refuses,
}

/// Air temperature minus dew point (Magnus formula), per reading:
/// γ = ln(RH/100) + b·T/(c + T), T_d = c·γ/(b − γ), y = T − T_d.
struct DewPointSpread(SpreadBwd);

fn spread<T: Scalar>(t: T, rh: T) -> T {
    let (b, c) = (T::from(B).unwrap(), T::from(C).unwrap());
    let gamma = (rh / T::from(100.0).unwrap()).ln() + b * t / (c + t);
    t - c * gamma / (b - gamma)
}

impl CustomOp2 for DewPointSpread {
    fn name(&self) -> &'static str {
        "dew_point_spread"
    }
    fn cpu_fwd(
        &self,
        s1: &CpuStorage,
        l1: &Layout,
        s2: &CpuStorage,
        l2: &Layout,
    ) -> CResult<(CpuStorage, Shape)> {
        if l1.dims() != l2.dims() {
            candle_core::bail!("temperature and humidity differ in shape");
        }
        let out = match (s1, s2) {
            (CpuStorage::F32(t), CpuStorage::F32(rh)) => {
                CpuStorage::F32(binary_map(l1, l2, t, rh, spread::<f32>))
            }
            (CpuStorage::F64(t), CpuStorage::F64(rh)) => {
                CpuStorage::F64(binary_map(l1, l2, t, rh, spread::<f64>))
            }
            _ => candle_core::bail!("f32 or f64 arguments of one dtype"),
        };
        Ok((out, l1.shape().clone()))
    }
    fn bwd(&self, t: &CT, rh: &CT, _res: &CT, g: &CT) -> CResult<(Option<CT>, Option<CT>)> {
        if self.0 == SpreadBwd::Refuses {
            candle_core::bail!("humidity sensor offline");
        }
        let gamma = ((rh / 100.0)?.log()? + ((t * B)? / t.affine(1.0, C)?)?)?;
        let dtd_dgamma = (gamma.affine(-1.0, B)?.sqr()?.recip()? * (C * B))?;
        let dgamma_dt = (t.affine(1.0, C)?.sqr()?.recip()? * (B * C))?;
        let d_t = dtd_dgamma.mul(&dgamma_dt)?.affine(-1.0, 1.0)?.mul(g)?;
        let d_rh = dtd_dgamma.div(rh)?.mul(g)?;
        Ok(match self.0 {
            SpreadBwd::HumiditySignLost => (Some(d_t), Some(d_rh)),
            SpreadBwd::NoHumidity => (Some(d_t), None),
            _ => (Some(d_t), Some(d_rh.neg()?)),
        })
    }
}

/// Readings smoothed over neighbouring stations: y = W·x + b, with W a
/// station-by-station weight matrix.
struct NeighbourMix {
    /// PLANTED BUG when true: ∂W is returned transposed (x·gᵀ, not g·xᵀ).
    transposed_dw: bool,
}

impl CustomOp3 for NeighbourMix {
    fn name(&self) -> &'static str {
        "neighbour_mix"
    }
    fn cpu_fwd(
        &self,
        s1: &CpuStorage,
        l1: &Layout,
        s2: &CpuStorage,
        l2: &Layout,
        s3: &CpuStorage,
        l3: &Layout,
    ) -> CResult<(CpuStorage, Shape)> {
        fn mix<T: candle_core::WithDType + Scalar>(
            w: &[T],
            lw: &Layout,
            x: &[T],
            lx: &Layout,
            b: &[T],
            lb: &Layout,
        ) -> Vec<T> {
            let (w, x, b) = (
                unary_map(w, lw, |v| v),
                unary_map(x, lx, |v| v),
                unary_map(b, lb, |v| v),
            );
            let n = x.len();
            (0..b.len())
                .map(|i| (0..n).fold(b[i], |s, j| s + w[i * n + j] * x[j]))
                .collect()
        }
        let rows = l1.dims()[0];
        let out = match (s1, s2, s3) {
            (CpuStorage::F32(w), CpuStorage::F32(x), CpuStorage::F32(b)) => {
                CpuStorage::F32(mix(w, l1, x, l2, b, l3))
            }
            (CpuStorage::F64(w), CpuStorage::F64(x), CpuStorage::F64(b)) => {
                CpuStorage::F64(mix(w, l1, x, l2, b, l3))
            }
            _ => candle_core::bail!("f32 or f64 arguments of one dtype"),
        };
        Ok((out, Shape::from(rows)))
    }
    fn bwd(
        &self,
        w: &CT,
        x: &CT,
        _b: &CT,
        _res: &CT,
        g: &CT,
    ) -> CResult<(Option<CT>, Option<CT>, Option<CT>)> {
        let dw = if self.transposed_dw {
            x.unsqueeze(1)?.broadcast_mul(&g.unsqueeze(0)?)?
        } else {
            g.unsqueeze(1)?.broadcast_mul(&x.unsqueeze(0)?)?
        };
        let dx = w.t()?.matmul(&g.unsqueeze(1)?)?.squeeze(1)?;
        Ok((Some(dw), Some(dx), Some(g.clone())))
    }
}

// ------------------------------------------------------------ readings

fn temperatures<T: plumbline::Real>() -> Tensor<T> {
    let v = [6.5, 4.0, 2.5, 8.0, 6.0, 3.5, 3.0, 1.5, 0.5, 9.5, 7.0, 5.5];
    Tensor::new(vec![4, 3], v.iter().map(|&x| T::from_f64(x)).collect()).unwrap()
}

fn humidities<T: plumbline::Real>() -> Tensor<T> {
    let v = [
        71.0, 80.0, 88.0, 62.0, 70.0, 81.0, 85.0, 91.0, 96.0, 55.0, 64.0, 72.0,
    ];
    Tensor::new(vec![4, 3], v.iter().map(|&x| T::from_f64(x)).collect()).unwrap()
}

fn spread_layer<T: plumbline::Real + candle_core::WithDType>(
    bwd: SpreadBwd,
) -> CustomOp2Layer<DewPointSpread, T> {
    CustomOp2Layer::new(DewPointSpread(bwd), [4, 3], [4, 3])
        .with_names(["temperature", "humidity"], "spread")
}

fn spread_args<T: plumbline::Real>() -> Args<T> {
    Args::new(vec![temperatures(), humidities()], vec![])
}

fn mix_args() -> Args<f64> {
    let w = Tensor::new(
        vec![3, 3],
        vec![0.6, 0.3, 0.1, 0.25, 0.5, 0.25, 0.05, 0.35, 0.6],
    )
    .unwrap();
    let x = Tensor::new(vec![3], vec![2.5, -1.0, 4.0]).unwrap();
    let b = Tensor::new(vec![3], vec![0.2, -0.1, 0.4]).unwrap();
    Args::new(vec![w, x, b], vec![])
}

fn mix_layer(transposed_dw: bool) -> CustomOp3Layer<NeighbourMix, f64> {
    CustomOp3Layer::new(NeighbourMix { transposed_dw }, [3, 3], [3], [3])
        .with_names(["w", "x", "b"], "y")
}

// ------------------------------------------------- correct ops pass

#[test]
fn correct_ops_pass_in_both_precisions() {
    let hours = Tensor::new(vec![5], vec![-1.0, 0.3, 3.6, 6.9, 8.0]).unwrap();
    let chill64 = CustomOp1Layer::<_, f64>::new(
        ChillHours {
            forgets_width: false,
        },
        [5],
    );
    let report = Audit::new()
        .run(&chill64, &Args::new(vec![hours.clone()], vec![]))
        .unwrap();
    report.assert_passed();
    assert_eq!(report.precision(), "f64");

    let chill32 = CustomOp1Layer::<_, f32>::new(
        ChillHours {
            forgets_width: false,
        },
        [5],
    );
    let hours32 = Args::new(vec![hours.map(|v| v as f32)], vec![]);
    let report = Audit::new().run(&chill32, &hours32).unwrap();
    report.assert_passed();
    assert_eq!(report.precision(), "f32");

    Audit::new()
        .run(&spread_layer::<f64>(SpreadBwd::Correct), &spread_args())
        .unwrap()
        .assert_passed();
    Audit::new()
        .run(&spread_layer::<f32>(SpreadBwd::Correct), &spread_args())
        .unwrap()
        .assert_passed();
    let report = Audit::new().run(&mix_layer(false), &mix_args()).unwrap();
    report.assert_passed();
    let names: Vec<&str> = report.rows.iter().map(|r| r.name.as_str()).collect();
    for n in ["w", "x", "b"] {
        assert!(names.contains(&n), "{report}");
    }
}

#[test]
fn assert_backward_accepts_an_op_layer() {
    let layer = spread_layer::<f64>(SpreadBwd::Correct);
    let report = plumbline::assert_backward!(layer, &spread_args::<f64>(), seed = 5);
    assert_eq!(report.rows.len(), 2);
}

// ----------------------------------------------- planted bugs named

#[test]
fn factor_bug_is_named_with_its_factor() {
    // The 1/w of the chain rule left out: analytic = w · numeric, w = 0.5.
    let layer = CustomOp1Layer::<_, f64>::new(
        ChillHours {
            forgets_width: true,
        },
        [5],
    )
    .with_names(["temperature"], "chill");
    let hours = Tensor::new(vec![5], vec![-0.4, 0.3, 3.6, 6.9, 7.5]).unwrap();
    let report = Audit::new()
        .run(&layer, &Args::new(vec![hours], vec![]))
        .unwrap();
    let row = report_row(&report, "temperature");
    assert_eq!(row.verdict, Verdict::Disagrees, "{report}");
    match &row.diagnosis {
        Some(Diagnosis::Scaled { factor, .. }) => {
            assert!((factor - CHILL_WIDTH).abs() < 1e-6, "{report}")
        }
        other => panic!("expected a factor of 0.5, got {other:?}\n{report}"),
    }
}

#[test]
fn sign_bug_is_named_on_its_row_only() {
    let report = Audit::new()
        .run(
            &spread_layer::<f64>(SpreadBwd::HumiditySignLost),
            &spread_args(),
        )
        .unwrap();
    let humidity = report_row(&report, "humidity");
    assert_eq!(humidity.verdict, Verdict::Disagrees, "{report}");
    assert_eq!(humidity.diagnosis, Some(Diagnosis::SignFlipped), "{report}");
    assert!(
        report_row(&report, "temperature").verdict.is_pass(),
        "{report}"
    );
    // The f32 op is caught the same way.
    let report = Audit::new()
        .run(
            &spread_layer::<f32>(SpreadBwd::HumiditySignLost),
            &spread_args(),
        )
        .unwrap();
    let humidity = report_row(&report, "humidity");
    assert_eq!(humidity.diagnosis, Some(Diagnosis::SignFlipped), "{report}");
}

#[test]
fn transpose_bug_is_named_with_its_axes() {
    let report = Audit::new().run(&mix_layer(true), &mix_args()).unwrap();
    let w = report_row(&report, "w");
    assert_eq!(w.verdict, Verdict::Disagrees, "{report}");
    assert_eq!(
        w.diagnosis,
        Some(Diagnosis::Transposed { axes: (0, 1) }),
        "{report}"
    );
    assert!(report_row(&report, "x").verdict.is_pass(), "{report}");
    assert!(report_row(&report, "b").verdict.is_pass(), "{report}");
}

// ----------------------------------------- None and Err from the op

#[test]
fn none_from_bwd_is_a_missing_row() {
    let report = Audit::new()
        .run(&spread_layer::<f64>(SpreadBwd::NoHumidity), &spread_args())
        .unwrap();
    let humidity = report_row(&report, "humidity");
    assert_eq!(humidity.verdict, Verdict::Missing, "{report}");
    assert_eq!(humidity.diagnosis, Some(Diagnosis::Missing), "{report}");
    assert!(
        report_row(&report, "temperature").verdict.is_pass(),
        "{report}"
    );
    assert!(!report.passed());
}

#[test]
fn err_from_bwd_is_a_typed_error_naming_the_op() {
    let layer = spread_layer::<f64>(SpreadBwd::Refuses);
    let err = Audit::new().run(&layer, &spread_args()).unwrap_err();
    match &err {
        Error::OpFailed {
            op,
            step,
            call,
            message,
            ..
        } => {
            assert_eq!(*op, "dew_point_spread");
            assert_eq!(*step, "bwd");
            assert_eq!(call, "backward");
            assert!(message.contains("humidity sensor offline"), "{err}");
        }
        other => panic!("expected OpFailed, got {other:?}"),
    }
    let text = err.to_string();
    assert!(
        text.contains("`dew_point_spread`") && text.contains("`bwd`") && text.contains("backward"),
        "{text}"
    );
}

#[test]
fn err_from_the_forward_is_a_typed_error_naming_the_op() {
    // Shapes the op refuses: its cpu_fwd fails at the first forward.
    let layer = CustomOp2Layer::<_, f64>::new(DewPointSpread(SpreadBwd::Correct), [4, 3], [3, 4]);
    let rh = Tensor::new(vec![3, 4], humidities::<f64>().data().to_vec()).unwrap();
    let err = Audit::new()
        .run(&layer, &Args::new(vec![temperatures(), rh], vec![]))
        .unwrap_err();
    assert!(
        matches!(&err, Error::OpFailed { op: "dew_point_spread", step: "cpu_fwd", call, .. }
            if call == "forward"),
        "{err:?}"
    );
    assert!(err.to_string().contains("differ in shape"), "{err}");
}

/// The spread op refusing humidities above saturation (100 %).
struct SaturationChecked;

impl CustomOp2 for SaturationChecked {
    fn name(&self) -> &'static str {
        "checked_spread"
    }
    fn cpu_fwd(
        &self,
        s1: &CpuStorage,
        l1: &Layout,
        s2: &CpuStorage,
        l2: &Layout,
    ) -> CResult<(CpuStorage, Shape)> {
        if unary_map(s2.as_slice::<f64>()?, l2, |rh| rh)
            .iter()
            .any(|&rh| rh > 100.0)
        {
            candle_core::bail!("relative humidity above 100 %");
        }
        DewPointSpread(SpreadBwd::Correct).cpu_fwd(s1, l1, s2, l2)
    }
    fn bwd(&self, t: &CT, rh: &CT, res: &CT, g: &CT) -> CResult<(Option<CT>, Option<CT>)> {
        DewPointSpread(SpreadBwd::Correct).bwd(t, rh, res, g)
    }
}

#[test]
fn err_at_a_moved_point_says_where() {
    // Nearly saturated air: the audit's own arguments are fine, but a
    // reference step above 100 % makes the forward refuse.
    let layer = CustomOp2Layer::<_, f64>::new(SaturationChecked, [2], [2])
        .with_names(["temperature", "humidity"], "spread");
    let t = Tensor::new(vec![2], vec![1.5, 0.5]).unwrap();
    let rh = Tensor::new(vec![2], vec![93.0, 99.5]).unwrap();
    let err = Audit::new()
        .run(&layer, &Args::new(vec![t, rh], vec![]))
        .unwrap_err();
    match &err {
        Error::OpFailed {
            op: "checked_spread",
            step: "cpu_fwd",
            call,
            message,
            ..
        } => {
            assert!(call.starts_with("forward"), "{err}");
            // Ridders' method starts with a wide step (here from 93 %).
            assert!(call.contains("while `humidity` ["), "{err}");
            assert!(call.contains("was moved to"), "{err}");
            // One line: no backtrace from candle in the message.
            assert!(!message.contains('\n'), "{err}");
            assert!(message.contains("above 100 %"), "{err}");
        }
        other => panic!("expected OpFailed from checked_spread, got {other:?}"),
    }
}

#[test]
#[should_panic(expected = "op `dew_point_spread` returned an error from `cpu_fwd`")]
fn outside_an_audit_the_error_is_a_panic_with_the_same_text() {
    let layer = CustomOp2Layer::<_, f64>::new(DewPointSpread(SpreadBwd::Correct), [2], [3]);
    let t = Tensor::new(vec![2], vec![1.0, 2.0]).unwrap();
    let rh = Tensor::new(vec![3], vec![50.0, 60.0, 70.0]).unwrap();
    let _ = layer.forward(&Args::new(vec![t, rh], vec![]));
}

// ------------------------------------ f32 ops, random readings, no alarm

/// 200 seeded draws of evening readings per op, in f32: a correct op never
/// raises an alarm.
#[test]
fn correct_f32_ops_raise_no_false_alarm_over_random_readings() {
    let mut rng = rand::rngs::StdRng::seed_from_u64(20_261_202);
    let chill = CustomOp1Layer::<_, f32>::new(
        ChillHours {
            forgets_width: false,
        },
        [6],
    );
    let spread = spread_layer::<f32>(SpreadBwd::Correct);
    let mix = CustomOp3Layer::<_, f32>::new(
        NeighbourMix {
            transposed_dw: false,
        },
        [3, 3],
        [3],
        [3],
    );
    let mut alarms = Vec::new();
    let (mut audits, mut forwards) = (0, 0);
    for case in 0..200 {
        let seed = rng.random::<u64>();
        let hours = Tensor::from_fn(vec![6], |_| rng.random_range(-3.0_f32..10.0));
        let report = Audit::new()
            .seed(seed)
            .run(&chill, &Args::new(vec![hours], vec![]))
            .unwrap();
        (audits, forwards) = (audits + 1, forwards + report.forward_evals);
        if !report.passed() {
            alarms.push(format!("chill_hours, case {case}:\n{report}"));
        }
        let t = Tensor::from_fn(vec![4, 3], |_| rng.random_range(-5.0_f32..15.0));
        let rh = Tensor::from_fn(vec![4, 3], |_| rng.random_range(30.0_f32..100.0));
        let report = Audit::new()
            .seed(seed)
            .run(&spread, &Args::new(vec![t, rh], vec![]))
            .unwrap();
        (audits, forwards) = (audits + 1, forwards + report.forward_evals);
        if !report.passed() {
            alarms.push(format!("dew_point_spread, case {case}:\n{report}"));
        }
        let w = Tensor::from_fn(vec![3, 3], |_| rng.random_range(0.0_f32..1.0));
        let x = Tensor::from_fn(vec![3], |_| rng.random_range(-5.0_f32..15.0));
        let b = Tensor::from_fn(vec![3], |_| rng.random_range(-1.0_f32..1.0));
        let report = Audit::new()
            .seed(seed)
            .run(&mix, &Args::new(vec![w, x, b], vec![]))
            .unwrap();
        (audits, forwards) = (audits + 1, forwards + report.forward_evals);
        if !report.passed() {
            alarms.push(format!("neighbour_mix, case {case}:\n{report}"));
        }
    }
    assert_eq!(audits, 600);
    // Real differences in f32: well over one forward per checked element.
    assert!(
        forwards > 600 * 20,
        "{forwards} forwards in {audits} audits"
    );
    assert!(
        alarms.is_empty(),
        "{} false alarms:\n{}",
        alarms.len(),
        alarms.join("\n")
    );
}

// ------------------------------------------------ through autograd

/// Frost risk per reading: σ(k · (s0 − spread(T, RH))), with the spread
/// from the custom op and the rest from candle's own ops.
fn frost_risk(bwd: SpreadBwd) -> AutogradLayer<impl Fn(&[CT]) -> CResult<CT>, f64> {
    let sig = Signature::new()
        .input("temperature", "station, hour")
        .input("humidity", "station, hour")
        .param("k", "")
        .param("s0", "")
        .output("risk", "station, hour");
    AutogradLayer::new(sig, move |t: &[CT]| {
        let spread = t[0].apply_op2(&t[1], DewPointSpread(bwd))?;
        let z = t[3].broadcast_sub(&spread)?.broadcast_mul(&t[2])?;
        CT::ones_like(&z)?.div(&(z.neg()?.exp()? + 1.0)?)
    })
    .with_name("frost_risk")
}

fn risk_args() -> Args<f64> {
    Args::new(
        vec![temperatures(), humidities()],
        vec![Tensor::scalar(0.8), Tensor::scalar(2.5)],
    )
}

#[test]
fn autograd_passes_a_composed_function() {
    let report = Audit::new()
        .run(&frost_risk(SpreadBwd::Correct), &risk_args())
        .unwrap();
    report.assert_passed();
    assert_eq!(report.rows.len(), 4);
}

#[test]
fn autograd_catches_a_buggy_op_inside_a_model() {
    let report = Audit::new()
        .run(&frost_risk(SpreadBwd::HumiditySignLost), &risk_args())
        .unwrap();
    let humidity = report_row(&report, "humidity");
    assert_eq!(humidity.verdict, Verdict::Disagrees, "{report}");
    assert_eq!(humidity.diagnosis, Some(Diagnosis::SignFlipped), "{report}");
    for ok in ["temperature", "k", "s0"] {
        assert!(report_row(&report, ok).verdict.is_pass(), "{report}");
    }
}

#[test]
fn autograd_reads_none_inside_as_zero_and_fails_it() {
    // candle's convention: no gradient is a zero gradient. Where the true
    // derivative is not zero, the row fails as all zero.
    let report = Audit::new()
        .run(&frost_risk(SpreadBwd::NoHumidity), &risk_args())
        .unwrap();
    let humidity = report_row(&report, "humidity");
    assert_eq!(humidity.verdict, Verdict::Disagrees, "{report}");
    assert_eq!(humidity.diagnosis, Some(Diagnosis::AllZero), "{report}");
}

#[test]
fn autograd_error_names_the_function_and_step() {
    let err = Audit::new()
        .run(&frost_risk(SpreadBwd::Refuses), &risk_args())
        .unwrap_err();
    assert!(
        matches!(&err, Error::OpFailed { op: "frost_risk", step: "Tensor::backward", call, .. }
            if call == "backward"),
        "{err:?}"
    );
    assert!(err.to_string().contains("humidity sensor offline"), "{err}");
}

#[test]
fn autograd_fixed_inputs_take_no_gradient_and_several_outputs_work() {
    // Two outputs (spread and its square), a fixed mask that is not
    // differentiated.
    let sig = Signature::new()
        .input("temperature", "n")
        .fixed_input("mask", "n")
        .output("masked", "n")
        .output("squared", "n");
    let layer = AutogradLayer::<_, f32>::new(sig, |t: &[CT]| {
        let m = t[0].mul(&t[1])?;
        Ok(vec![m.clone(), m.sqr()?])
    });
    let t = Tensor::new(vec![3], vec![1.5_f32, -0.5, 2.0]).unwrap();
    let mask = Tensor::new(vec![3], vec![1.0_f32, 0.0, 1.0]).unwrap();
    let report = Audit::new()
        .run(&layer, &Args::new(vec![t, mask], vec![]))
        .unwrap();
    report.assert_passed();
    assert_eq!(report.rows.len(), 1, "{report}");
}

// ------------------------------------------------------ conversions

#[test]
fn conversions_round_trip_and_name_the_problem() {
    let t = Tensor::new(vec![2, 3], vec![1.5_f32, -2.0, 0.25, 4.0, 1e-30, -7.5]).unwrap();
    let c: CT = (&t).into();
    assert_eq!(c.dtype(), DType::F32);
    assert_eq!(c.dims(), &[2, 3]);
    let back = Tensor::<f32>::try_from(&c).unwrap();
    assert_eq!(back, t);
    let owned: CT = t.clone().into();
    assert_eq!(Tensor::<f32>::try_from(owned).unwrap(), t);

    // f64, a scalar, and a non-contiguous view.
    let s = Tensor::scalar(-3.25_f64);
    assert_eq!(Tensor::<f64>::from_candle(&s.to_candle()).unwrap(), s);
    let m = CT::new(&[[1.0_f64, 2.0], [3.0, 4.0], [5.0, 6.0]], &Device::Cpu).unwrap();
    let view = m.t().unwrap();
    let tv = Tensor::<f64>::from_candle(&view).unwrap();
    assert_eq!(tv.shape(), &[2, 3]);
    assert_eq!(tv.data(), &[1.0, 3.0, 5.0, 2.0, 4.0, 6.0]);
    let wide = m.narrow(0, 1, 2).unwrap().broadcast_as((2, 2, 2)).unwrap();
    let tw = Tensor::<f64>::from_candle(&wide).unwrap();
    assert_eq!(tw.data(), &[3.0, 4.0, 5.0, 6.0, 3.0, 4.0, 5.0, 6.0]);

    // A dtype other than the target's: a typed error naming both.
    let err = Tensor::<f32>::from_candle(&m).unwrap_err();
    match &err {
        Error::Conversion { from, to, detail } => {
            assert!(
                from.contains("dtype f64") && from.contains("[3, 2]"),
                "{err}"
            );
            assert_eq!(to, "Tensor<f32>");
            assert!(detail.contains("to_dtype"), "{err}");
        }
        other => panic!("expected Conversion, got {other:?}"),
    }
    let ids = CT::new(&[1_u32, 2, 3], &Device::Cpu).unwrap();
    let err = Tensor::<f64>::try_from(&ids).unwrap_err();
    assert!(err.to_string().contains("dtype u32"), "{err}");
}
