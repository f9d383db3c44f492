//! What an audit costs: wall time of whole audits of a dense layer in each
//! scheme and precision, of the scalar schemes alone, and of the checks of
//! other rules (tangents with the adjoint identity, second order with the
//! integrability test) beside one forward and one backward of the same
//! layer, at two sizes.
//!
//! Run: `cargo bench --bench audit` (figures in README.md, "Performance").

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion};
use plumbline::{Audit, Scheme};
use std::hint::black_box;
use std::time::Duration;

#[path = "../tests/common/mod.rs"]
mod common;
use common::{dense_args, Dense, DenseBug};

fn audits(c: &mut Criterion) {
    let mut g = c.benchmark_group("audit_dense");
    // batch 8, 16 inputs, 8 outputs: 128 + 128 + 8 = 264 checked elements.
    let (batch, inp, out) = (8, 16, 8);
    for scheme in [Scheme::ComplexStep, Scheme::Ridders, Scheme::Central] {
        let args = dense_args::<f64>(batch, inp, out, 1);
        let layer = Dense::<f64>::new(DenseBug::None);
        let audit = Audit::new().scheme(scheme);
        g.bench_with_input(BenchmarkId::new("f64", scheme), &args, |b, args| {
            b.iter(|| black_box(audit.run(&layer, args).unwrap()))
        });
        let args = dense_args::<f32>(batch, inp, out, 1);
        let layer = Dense::<f32>::new(DenseBug::None);
        g.bench_with_input(BenchmarkId::new("f32", scheme), &args, |b, args| {
            b.iter(|| black_box(audit.run(&layer, args).unwrap()))
        });
    }
    g.finish();
}

/// The gallery's dense layer at batch n, i inputs, o outputs.
fn dense_rule_args(n: usize, i: usize, o: usize) -> plumbline::Args<f64> {
    use plumbline::Tensor;
    let x = Tensor::from_fn(vec![n, i], |ix| ((ix[0] * 7 + ix[1]) as f64).sin());
    let w = Tensor::from_fn(vec![o, i], |ix| ((ix[0] * 3 + ix[1]) as f64).cos() / 4.0);
    let b = Tensor::from_fn(vec![o], |ix| ix[0] as f64 / 10.0);
    plumbline::Args::new(vec![x], vec![w, b])
}

fn rules(c: &mut Criterion) {
    use plumbline::gallery::Dense as GalleryDense;
    use plumbline::{Forward, Layer};
    let mut g = c.benchmark_group("rules_dense");
    let layer = GalleryDense::<f64>::new(None);
    let audit = Audit::new();
    // 264 and 16,448 differentiable elements.
    for (label, (n, i, o)) in [("small", (8, 16, 8)), ("large", (64, 128, 64))] {
        let args = dense_rule_args(n, i, o);
        let up = layer.forward(&args);
        g.bench_with_input(
            BenchmarkId::new("forward_and_backward", label),
            &args,
            |b, a| b.iter(|| black_box(layer.backward(a, &layer.forward(a)))),
        );
        g.bench_with_input(
            BenchmarkId::new("tangents_and_adjoint", label),
            &args,
            |b, a| b.iter(|| black_box(audit.run_tangents(&layer, a).unwrap())),
        );
        g.bench_with_input(BenchmarkId::new("second_order", label), &args, |b, a| {
            b.iter(|| black_box(audit.run_second_order(&layer, a).unwrap()))
        });
        black_box(up);
    }
    g.finish();
}

fn schemes(c: &mut Criterion) {
    let f = |x: f64| x.exp() / (x.sin().powi(3) + x.cos().powi(3)).sqrt();
    c.bench_function("scalar/central_difference", |b| {
        b.iter(|| plumbline::scheme::central_difference(f, black_box(1.5)))
    });
    c.bench_function("scalar/ridders_derivative", |b| {
        b.iter(|| plumbline::scheme::ridders_derivative(f, black_box(1.5), 0.1))
    });
    c.bench_function("scalar/complex_step_derivative", |b| {
        b.iter(|| {
            plumbline::scalar::complex_step_derivative(
                |z| {
                    use num_traits::Float;
                    z.exp() / (z.sin().powi(3) + z.cos().powi(3)).sqrt()
                },
                black_box(1.5),
                1e-20,
            )
        })
    });
}

criterion_group! {
    name = benches;
    config = Criterion::default()
        .sample_size(10)
        .warm_up_time(Duration::from_millis(300))
        .measurement_time(Duration::from_secs(1));
    targets = audits, schemes, rules
}
criterion_main!(benches);
