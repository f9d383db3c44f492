//! A layer written with ndarray operations, audited: the hive scale's
//! weight readings over a day are smoothed by a learned weighted average
//! across the hour slots, then scaled, y = (x · softmax(a)) ⊙ s.
//!
//! Run: `cargo run --example ndarray_layer --features ndarray`

use ndarray::{Array1, Array2, Axis, Ix1, Ix2, ShapeBuilder};
use plumbline::{assert_backward, Args, Forward, Gradients, Layer, Scheme, Signature, Tensor};

/// Weighted daily average of scale readings with softmax weights over the
/// hour slots, scaled per hive.
struct DailyAverage;

fn arrays(a: &Args<f64>) -> (Array2<f64>, Array1<f64>, Array1<f64>) {
    // `Tensor::to_ndarray` gives a dynamic-rank array; the signature fixes
    // the ranks, which the audit checks before calling the layer.
    let fix2 = |t: &Tensor<f64>| {
        t.to_ndarray()
            .into_dimensionality::<Ix2>()
            .unwrap_or_default()
    };
    let fix1 = |t: &Tensor<f64>| {
        t.to_ndarray()
            .into_dimensionality::<Ix1>()
            .unwrap_or_default()
    };
    (fix2(a.input(0)), fix1(a.param(0)), fix1(a.input(1)))
}

fn softmax(a: &Array1<f64>) -> Array1<f64> {
    let m = a.fold(f64::NEG_INFINITY, |m, &v| m.max(v));
    let e = a.mapv(|v| (v - m).exp());
    let s = e.sum();
    e / s
}

impl Layer for DailyAverage {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("readings", "hive, hour")
            .input("scale", "hive")
            .param("logits", "hour")
            .output("average", "hive")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let (x, logits, s) = arrays(a);
        let g = up[0]
            .to_ndarray()
            .into_dimensionality::<Ix1>()
            .unwrap_or_default();
        let p = softmax(&logits);
        let m = x.dot(&p); // average before scaling
        let gm = &g * &s; // d/dm
                          // d/dx[h, t] = gm[h] p[t]
        let dx = gm
            .view()
            .insert_axis(Axis(1))
            .dot(&p.view().insert_axis(Axis(0)));
        let ds = &g * &m;
        // d/dp[t] = Σ_h gm[h] x[h, t]; softmax: dlogits = p ⊙ (dp − p·dp)
        let dp = x.t().dot(&gm);
        let dlogits = &p * &(&dp - p.dot(&dp));
        Gradients::from(vec![
            Tensor::from_ndarray(&dx),
            Tensor::from_ndarray(&ds),
            Tensor::from_ndarray(&dlogits),
        ])
    }
}

impl Forward for DailyAverage {
    fn forward(&self, a: &Args<f64>) -> Vec<Tensor<f64>> {
        let (x, logits, s) = arrays(a);
        let y = x.dot(&softmax(&logits)) * &s;
        vec![Tensor::from_ndarray(&y)]
    }
}

fn main() -> Result<(), plumbline::Error> {
    // Weight change (kg) in four six-hour slots for three hives (demo data),
    // built column-major to show that any layout converts.
    let readings = Array2::from_shape_vec(
        (3, 4).f(),
        vec![
            0.1, -0.2, 0.05, 0.6, 0.3, 0.4, 0.2, -0.1, 0.0, -0.3, 0.1, 0.2,
        ],
    )
    .expect("12 values for 3 × 4");
    let args = Args::new(
        vec![
            Tensor::from_ndarray(&readings),
            Tensor::new(vec![3], vec![1.0, 0.8, 1.3])?,
        ],
        vec![Tensor::new(vec![4], vec![0.2, -0.4, 0.9, 0.0])?],
    );
    let report = assert_backward!(DailyAverage, &args, scheme = Scheme::Ridders);
    println!("{report}");
    Ok(())
}
