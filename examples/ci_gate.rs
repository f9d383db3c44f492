//! The CI gate: audit every hand-written layer of a beehive health model
//! with settings from `PLUMBLINE_*` variables, keep a JSON report and a
//! Markdown summary per layer (and an error-against-step picture per
//! failing tensor), and exit non-zero if any backward disagrees.
//!
//! The model scores each hive's health from its sensors: the hive scale's
//! weight change over the day (kg), brood-nest temperature (°C), humidity,
//! and entrance traffic (bees per minute, in hundreds).
//!
//! ```sh
//! PLUMBLINE_REPORT_DIR=target/audits PLUMBLINE_FORMAT=table \
//!     cargo run --example ci_gate
//! cat target/audits/*.md >> "$GITHUB_STEP_SUMMARY"   # on GitHub Actions
//! ```
//!
//! Try `PLUMBLINE_SEED=7`, `PLUMBLINE_MARGIN_FACTOR=0.5` or
//! `PLUMBLINE_SCHEME=ridders`; an invalid value stops with an error naming
//! the variable.

use std::process::ExitCode;

use plumbline::env::Environment;
use plumbline::{Args, GenericForward, Gradients, Layer, Scalar, Signature, Tensor};

/// Sensor calibration: readings·gain + offset, per sensor.
struct Calibrate;

impl Layer for Calibrate {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("raw", "hive, sensor")
            .param("gain", "sensor")
            .param("offset", "sensor")
            .output("calibrated", "hive, sensor")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let (x, g, u) = (a.input(0), a.param(0), &up[0]);
        let (n, k) = (x.shape()[0], x.shape()[1]);
        let dx = Tensor::from_fn(vec![n, k], |ix| {
            u.data()[ix[0] * k + ix[1]] * g.data()[ix[1]]
        });
        let dg = Tensor::from_fn(vec![k], |ix| {
            (0..n)
                .map(|h| u.data()[h * k + ix[0]] * x.data()[h * k + ix[0]])
                .sum()
        });
        let doff = Tensor::from_fn(vec![k], |ix| (0..n).map(|h| u.data()[h * k + ix[0]]).sum());
        Gradients::from(vec![dx, dg, doff])
    }
}

impl GenericForward for Calibrate {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, g, o) = (a.input(0), a.param(0), a.param(1));
        let k = x.shape()[1];
        vec![Tensor::from_fn(x.shape().to_vec(), |ix| {
            x.data()[ix[0] * k + ix[1]] * g.data()[ix[1]] + o.data()[ix[1]]
        })]
    }
}

/// Health score per hive: softplus of a weighted sum of the calibrated
/// sensors, so the score is positive.
struct Health;

impl Layer for Health {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("calibrated", "hive, sensor")
            .param("weight", "sensor")
            .output("health", "hive")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let (x, w, u) = (a.input(0), a.param(0), &up[0]);
        let (n, k) = (x.shape()[0], x.shape()[1]);
        // d softplus(z)/dz = logistic(z)
        let dz: Vec<f64> = (0..n)
            .map(|h| {
                let z: f64 = (0..k).map(|j| w.data()[j] * x.data()[h * k + j]).sum();
                u.data()[h] / (1.0 + (-z).exp())
            })
            .collect();
        let dx = Tensor::from_fn(vec![n, k], |ix| dz[ix[0]] * w.data()[ix[1]]);
        let dw = Tensor::from_fn(vec![k], |ix| {
            (0..n).map(|h| dz[h] * x.data()[h * k + ix[0]]).sum()
        });
        Gradients::from(vec![dx, dw])
    }
}

impl GenericForward for Health {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, w) = (a.input(0), a.param(0));
        let (n, k) = (x.shape()[0], x.shape()[1]);
        vec![Tensor::from_fn(vec![n], |ix| {
            let mut z = T::zero();
            for j in 0..k {
                z += w.data()[j] * x.data()[ix[0] * k + j];
            }
            (T::one() + z.exp()).ln()
        })]
    }
}

fn t(shape: &[usize], data: &[f64]) -> Tensor<f64> {
    Tensor::new(shape.to_vec(), data.to_vec()).expect("demo data fits its shape")
}

fn main() -> ExitCode {
    let env = match Environment::from_env() {
        Ok(env) => env,
        Err(e) => {
            eprintln!("ci_gate: {e}");
            return ExitCode::from(2);
        }
    };
    // Three hives (demo data): weight change kg, brood °C, humidity, traffic.
    let raw = t(
        &[3, 4],
        &[
            0.8, 34.6, 0.62, 1.9, //
            -0.3, 33.1, 0.71, 0.7, //
            0.2, 35.0, 0.58, 1.4,
        ],
    );
    let gain = t(&[4], &[1.0, 0.2, 2.0, 0.5]);
    let offset = t(&[4], &[0.0, -6.9, -1.2, -0.5]);
    let cal_args = Args::new(vec![raw], vec![gain, offset]);
    let calibrated = Calibrate.forward_generic(&cal_args).remove(0);
    let health_args = Args::new(vec![calibrated], vec![t(&[4], &[0.9, 1.2, -0.8, 0.6])]);

    let audit = match env.audit(|a| a) {
        Ok(a) => a,
        Err(e) => {
            eprintln!("ci_gate: {e}");
            return ExitCode::from(2);
        }
    };
    let mut failing = 0;
    let runs = [
        audit.clone().name("calibrate").run(&Calibrate, &cal_args),
        audit.clone().name("health").run(&Health, &health_args),
    ];
    for run in runs {
        let report = match run {
            Ok(r) => r,
            Err(e) => {
                eprintln!("ci_gate: {e}");
                return ExitCode::from(2);
            }
        };
        println!("{report}");
        if let Some(dir) = &env.report_dir {
            match plumbline::render::write_report(dir, &report) {
                Ok(paths) => {
                    for p in paths {
                        println!("wrote {}", p.display());
                    }
                }
                Err(e) => {
                    eprintln!("ci_gate: {e}");
                    return ExitCode::from(2);
                }
            }
        }
        if !report.passed() {
            failing += 1;
            eprintln!("{}", plumbline::render::failure_message(&report));
        }
    }
    println!("{failing} layer(s) with a backward that disagrees");
    if failing == 0 {
        ExitCode::SUCCESS
    } else {
        ExitCode::FAILURE
    }
}
