//! Demo: audit the hand-written layers of a small model that predicts
//! orchard frost risk from weather-station readings.
//!
//! The model: standardise five evening readings per station (air
//! temperature, dew point, wind speed, cloud cover, relative humidity),
//! a tanh hidden layer, and a logistic head trained with binary
//! cross-entropy on "frost by morning" labels. The head's backward has a
//! planted bug; the audit names it.
//!
//! Run: `cargo run --example frost`
//!
//! With `PLUMBLINE_REPORT_DIR` set (and the other `PLUMBLINE_*` variables,
//! as in the CI gate) it also writes a JSON report and a Markdown summary
//! per layer there, and an error-against-step picture (SVG) for the
//! failing row:
//!
//! ```sh
//! PLUMBLINE_REPORT_DIR=target/frost cargo run --example frost
//! ```

use plumbline::env::Environment;
use plumbline::{Args, GenericForward, Gradients, Layer, Scalar, Signature, Tensor};

/// Per-feature standardisation: y = (x − centre) ⊙ inv_scale.
struct Standardize;

impl Layer for Standardize {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("readings", "station, feature")
            .param("centre", "feature")
            .param("inv_scale", "feature")
            .output("z", "station, feature")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let (x, c, s, g) = (a.input(0), a.param(0), a.param(1), &up[0]);
        let (n, f) = (x.shape()[0], x.shape()[1]);
        let dx = Tensor::from_fn(vec![n, f], |ix| g.get(ix).unwrap() * s.data()[ix[1]]);
        let dc = Tensor::from_fn(vec![f], |ix| {
            -(0..n).map(|i| g.get(&[i, ix[0]]).unwrap()).sum::<f64>() * s.data()[ix[0]]
        });
        let ds = Tensor::from_fn(vec![f], |ix| {
            (0..n)
                .map(|i| {
                    g.get(&[i, ix[0]]).unwrap() * (x.get(&[i, ix[0]]).unwrap() - c.data()[ix[0]])
                })
                .sum()
        });
        Gradients::from(vec![dx, dc, ds])
    }
}

impl GenericForward for Standardize {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, c, s) = (a.input(0), a.param(0), a.param(1));
        vec![Tensor::from_fn(x.shape().to_vec(), |ix| {
            (x.get(ix).unwrap() - c.data()[ix[1]]) * s.data()[ix[1]]
        })]
    }
}

/// Hidden layer: h = tanh(z·Wᵀ + b).
struct Hidden;

impl Layer for Hidden {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("z", "station, feature")
            .param("w_hidden", "unit, feature")
            .param("b_hidden", "unit")
            .output("h", "station, unit")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let (z, w) = (a.input(0), a.param(0));
        let (n, f, u) = (z.shape()[0], z.shape()[1], w.shape()[0]);
        let h = &self.forward_generic(a)[0];
        // dpre = g ⊙ (1 − h²)
        let dpre = Tensor::from_fn(vec![n, u], |ix| {
            let t = h.get(ix).unwrap();
            up[0].get(ix).unwrap() * (1.0 - t * t)
        });
        let dz = Tensor::from_fn(vec![n, f], |ix| {
            (0..u)
                .map(|j| dpre.get(&[ix[0], j]).unwrap() * w.get(&[j, ix[1]]).unwrap())
                .sum()
        });
        let dw = Tensor::from_fn(vec![u, f], |ix| {
            (0..n)
                .map(|i| dpre.get(&[i, ix[0]]).unwrap() * z.get(&[i, ix[1]]).unwrap())
                .sum()
        });
        let db = Tensor::from_fn(vec![u], |ix| {
            (0..n).map(|i| dpre.get(&[i, ix[0]]).unwrap()).sum()
        });
        Gradients::from(vec![dz, dw, db])
    }
}

impl GenericForward for Hidden {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (z, w, b) = (a.input(0), a.param(0), a.param(1));
        let (n, f, u) = (z.shape()[0], z.shape()[1], w.shape()[0]);
        vec![Tensor::from_fn(vec![n, u], |ix| {
            let mut s = b.data()[ix[1]];
            for k in 0..f {
                s += w.get(&[ix[1], k]).unwrap() * z.get(&[ix[0], k]).unwrap();
            }
            s.tanh()
        })]
    }
}

/// Logistic head with mean binary cross-entropy over the stations.
/// PLANTED BUG: the weight gradient forgets the 1/N of the mean.
struct FrostHead;

impl Layer for FrostHead {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("h", "station, unit")
            .fixed_input("frost", "station")
            .param("w_out", "unit")
            .param("b_out", "")
            .output("loss", "")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let (h, y, w, b) = (a.input(0), a.input(1), a.param(0), a.param(1));
        let (n, u) = (h.shape()[0], h.shape()[1]);
        let g = up[0].data()[0];
        // ds_i = g · (σ(s_i) − y_i) / N
        let ds: Vec<f64> = (0..n)
            .map(|i| {
                let s = b.data()[0]
                    + (0..u)
                        .map(|k| w.data()[k] * h.get(&[i, k]).unwrap())
                        .sum::<f64>();
                g * (1.0 / (1.0 + (-s).exp()) - y.data()[i]) / n as f64
            })
            .collect();
        let dh = Tensor::from_fn(vec![n, u], |ix| ds[ix[0]] * w.data()[ix[1]]);
        // BUG: multiplies the per-station terms back by N (sum, not mean).
        let dw = Tensor::from_fn(vec![u], |ix| {
            (0..n)
                .map(|i| ds[i] * n as f64 * h.get(&[i, ix[0]]).unwrap())
                .sum()
        });
        let db = Tensor::scalar(ds.iter().sum());
        Gradients::from(vec![dh, dw, db])
    }
}

impl GenericForward for FrostHead {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (h, y, w, b) = (a.input(0), a.input(1), a.param(0), a.param(1));
        let (n, u) = (h.shape()[0], h.shape()[1]);
        let mut loss = T::zero();
        for i in 0..n {
            let mut s = b.data()[0];
            for k in 0..u {
                s += w.data()[k] * h.get(&[i, k]).unwrap();
            }
            // −[y log σ(s) + (1 − y) log(1 − σ(s))] = softplus(s) − y·s
            let softplus = (T::one() + s.exp()).ln();
            loss += softplus - y.data()[i] * s;
        }
        vec![Tensor::scalar(loss / T::from(n).unwrap())]
    }
}

fn t(shape: &[usize], data: &[f64]) -> Tensor<f64> {
    Tensor::new(shape.to_vec(), data.to_vec()).expect("demo data fits its shape")
}

fn main() -> Result<(), plumbline::Error> {
    // Evening readings at four stations: air temperature °C, dew point °C,
    // wind m/s, cloud cover 0..1, relative humidity 0..1 (demo data).
    let readings = t(
        &[4, 5],
        &[
            2.5, -1.0, 0.8, 0.1, 0.78, //
            6.0, 3.5, 3.2, 0.7, 0.84, //
            0.5, -2.5, 0.3, 0.0, 0.81, //
            4.0, 1.0, 1.5, 0.4, 0.80,
        ],
    );
    let centre = t(&[5], &[3.0, 0.5, 1.5, 0.3, 0.8]);
    let inv_scale = t(&[5], &[0.5, 0.4, 0.7, 2.5, 20.0]);
    let std_args = Args::new(vec![readings], vec![centre, inv_scale]);
    let z = Standardize.forward_generic(&std_args).remove(0);

    let w_hidden = Tensor::from_fn(vec![3, 5], |ix| {
        0.3 * ((ix[0] * 5 + ix[1]) as f64 * 0.7).sin()
    });
    let b_hidden = t(&[3], &[0.1, -0.2, 0.05]);
    let hid_args = Args::new(vec![z], vec![w_hidden, b_hidden]);
    let h = Hidden.forward_generic(&hid_args).remove(0);

    let frost = t(&[4], &[1.0, 0.0, 1.0, 0.0]);
    let head_args = Args::new(
        vec![h, frost],
        vec![t(&[3], &[0.8, -0.5, 0.3]), Tensor::scalar(-0.1)],
    );

    // Unset `PLUMBLINE_*` variables change nothing here.
    let env = Environment::from_env()?;
    let audit = env.audit(|a| a.seed(2026))?;
    let mut reports = vec![
        audit.run(&Standardize, &std_args)?,
        audit.run(&Hidden, &hid_args)?,
        audit.run(&FrostHead, &head_args)?,
    ];
    // Failing layers first: the culprit is on top.
    reports.sort_by_key(|r| r.passed());
    for r in &reports {
        println!("{r}");
    }
    if let Some(dir) = &env.report_dir {
        for r in &reports {
            for path in plumbline::render::write_report(dir, r)? {
                println!("wrote {}", path.display());
            }
        }
    }
    let failing = reports.iter().filter(|r| !r.passed()).count();
    println!(
        "{failing} of {} layers have a backward that disagrees with its forward.",
        reports.len()
    );
    Ok(())
}
