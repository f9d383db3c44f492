//! Cost of the numeric references (placeholder until the layer benches land).
use criterion::{criterion_group, criterion_main, Criterion};

fn schemes(c: &mut Criterion) {
    let f = |x: f64| x.exp() / (x.sin().powi(3) + x.cos().powi(3)).sqrt();
    c.bench_function("central_difference", |b| {
        b.iter(|| plumbline::central_difference(f, std::hint::black_box(1.5)))
    });
    c.bench_function("ridders_derivative", |b| {
        b.iter(|| plumbline::ridders_derivative(f, std::hint::black_box(1.5), 0.1))
    });
}

criterion_group!(benches, schemes);
criterion_main!(benches);
