//! The structured fingerprints, one planted bug each, read back as the
//! exact diagnosis text; and bugs that fit none of them, which must read
//! "wrong everywhere" (or "partial"), never a mechanism they do not have.
//!
//! The layer is a hive-warmth map: `y[h, s] = γ[s]·w[h, s]·x[h, s] + β[s]`
//! for hives h and sensors s (any rank: the last axis is the sensor axis).
//! Its backward is right, then one gradient is passed through a planted
//! mangling of the kind the fingerprint describes.

use approx::{assert_abs_diff_eq, assert_relative_eq, relative_eq};
use plumbline::prelude::*;
use plumbline::{Diagnosis, Row};

/// Rewrites one correct gradient (the tensor at `target`: 0 = x, 1 = w,
/// 2 = γ, 3 = β) given the arguments and the upstream gradient.
type Mangle = fn(&Tensor<f64>, &Args<f64>, &Tensor<f64>) -> Tensor<f64>;

struct HiveWarmth {
    /// The dims of x and w, e.g. `"hive, sensor"`.
    dims: &'static str,
    target: usize,
    mangle: Option<Mangle>,
}

impl Layer for HiveWarmth {
    type Real = f64;
    fn signature(&self) -> Signature {
        let last = self.dims.rsplit(", ").next().unwrap_or(self.dims);
        Signature::new()
            .input("x", self.dims)
            .param("w", self.dims)
            .param("gamma", last)
            .param("beta", last)
            .output("y", self.dims)
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let (x, w, gamma) = (a.input(0), a.param(0), a.param(1));
        let g = &up[0];
        let s = *x.shape().last().unwrap();
        let per = |f: &dyn Fn(usize) -> f64| {
            let mut out = vec![0.0; s];
            for j in 0..x.len() {
                out[j % s] += f(j);
            }
            Tensor::new(vec![s], out).unwrap()
        };
        let (xd, wd, gd, gm) = (x.data(), w.data(), g.data(), gamma.data());
        let mut grads = vec![
            Tensor::new(
                x.shape().to_vec(),
                (0..x.len()).map(|j| gd[j] * gm[j % s] * wd[j]).collect(),
            )
            .unwrap(),
            Tensor::new(
                x.shape().to_vec(),
                (0..x.len()).map(|j| gd[j] * gm[j % s] * xd[j]).collect(),
            )
            .unwrap(),
            per(&|j| gd[j] * wd[j] * xd[j]),
            per(&|j| gd[j]),
        ];
        if let Some(m) = self.mangle {
            grads[self.target] = m(&grads[self.target], a, g);
        }
        Gradients::from(grads)
    }
}

impl GenericForward for HiveWarmth {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let (x, w, gamma, beta) = (a.input(0), a.param(0), a.param(1), a.param(2));
        let s = *x.shape().last().unwrap();
        let (xd, wd) = (x.data(), w.data());
        let mut k = 0;
        vec![Tensor::from_fn(x.shape().to_vec(), |_| {
            let j = k;
            k += 1;
            gamma.data()[j % s] * wd[j] * xd[j] + beta.data()[j % s]
        })]
    }
}

/// Readings for hives × sensors of `shape`, from a xorshift generator
/// seeded by `seed` (invented data): x and w in [−1.5, 1.5] away from 0,
/// γ in [0.5, 2], β in [−0.5, 0.5].
fn hive_args(shape: &[usize], seed: u64) -> Args<f64> {
    let mut state = seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1;
    let mut unit = move || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    let n: usize = shape.iter().product();
    let s = *shape.last().unwrap();
    let mut away = |_: usize| {
        let v = 0.2 + 1.3 * unit();
        if unit() < 0.5 {
            -v
        } else {
            v
        }
    };
    let x = Tensor::new(shape.to_vec(), (0..n).map(&mut away).collect()).unwrap();
    let w = Tensor::new(shape.to_vec(), (0..n).map(&mut away).collect()).unwrap();
    let gamma = Tensor::new(vec![s], (0..s).map(|_| 0.5 + 1.5 * unit()).collect()).unwrap();
    let beta = Tensor::new(vec![s], (0..s).map(|_| unit() - 0.5).collect()).unwrap();
    Args::new(vec![x], vec![w, gamma, beta])
}

const NAMES: [&str; 4] = ["x", "w", "gamma", "beta"];

/// Audits the layer with `mangle` planted in gradient `target` and returns
/// that row (the other rows must agree).
fn row_of(dims: &'static str, shape: &[usize], target: usize, mangle: Mangle, seed: u64) -> Row {
    let layer = HiveWarmth {
        dims,
        target,
        mangle: Some(mangle),
    };
    let report = Audit::new()
        .seed(seed)
        .run(&layer, &hive_args(shape, seed))
        .unwrap();
    for r in &report.rows {
        assert_eq!(r.verdict.is_pass(), r.name != NAMES[target], "{report}");
    }
    report.row(NAMES[target]).unwrap().clone()
}

fn said(dims: &'static str, shape: &[usize], target: usize, mangle: Mangle) -> Vec<String> {
    (1..=4)
        .map(|seed| {
            let row = row_of(dims, shape, target, mangle, seed);
            row.diagnosis.map(|d| d.to_string()).unwrap_or_default()
        })
        .collect()
}

/// Every seed reads `want`.
fn reads(dims: &'static str, shape: &[usize], target: usize, mangle: Mangle, want: &str) {
    for (seed, text) in said(dims, shape, target, mangle).iter().enumerate() {
        assert_eq!(text, want, "seed {}", seed + 1);
    }
}

/// Every seed reads "wrong everywhere" or "partial": no mechanism named.
fn names_no_mechanism(dims: &'static str, shape: &[usize], target: usize, mangle: Mangle) {
    for seed in 1..=4 {
        let row = row_of(dims, shape, target, mangle, seed);
        let d = row.diagnosis.clone().unwrap();
        assert!(
            matches!(d, Diagnosis::WrongValues { .. } | Diagnosis::Partial { .. }),
            "seed {seed}: {d}"
        );
    }
}

/// A tensor of `t`'s shape whose element at multi-index `ix` is `f(t, ix)`.
fn remap(t: &Tensor<f64>, f: impl Fn(&Tensor<f64>, &[usize]) -> f64) -> Tensor<f64> {
    Tensor::from_fn(t.shape().to_vec(), |ix| f(t, ix))
}

#[test]
fn the_correct_layer_passes_with_no_diagnosis() {
    for (dims, shape) in [
        ("hive, sensor", vec![4, 6]),
        ("apiary, hive, sensor", vec![2, 3, 4]),
    ] {
        for seed in 1..=4 {
            let layer = HiveWarmth {
                dims,
                target: 0,
                mangle: None,
            };
            let r = Audit::new()
                .seed(seed)
                .run(&layer, &hive_args(&shape, seed))
                .unwrap();
            assert!(r.passed(), "{r}");
            assert!(r.rows.iter().all(|row| row.diagnosis.is_none()), "{r}");
        }
    }
}

// ---- the right values in the wrong places --------------------------------

#[test]
fn an_axis_read_backwards_is_flipped() {
    reads(
        "hive, sensor",
        &[4, 6],
        1,
        |t, _, _| remap(t, |t, ix| t[[ix[0], 5 - ix[1]]]),
        "flipped along axis 1",
    );
}

#[test]
fn a_kernel_flipped_along_two_axes_is_named_with_both() {
    reads(
        "apiary, hive, sensor",
        &[2, 3, 4],
        1,
        |t, _, _| remap(t, |t, ix| t[[ix[0], 2 - ix[1], 3 - ix[2]]]),
        "flipped along axes 1, 2",
    );
}

#[test]
fn two_gate_blocks_swapped_are_named() {
    // Axis 1 of 6 sensors in 3 blocks of 2: blocks 1 and 2 swapped.
    reads(
        "hive, sensor",
        &[4, 6],
        1,
        |t, _, _| {
            remap(t, |t, ix| {
                let j = match ix[1] / 2 {
                    1 => ix[1] + 2,
                    2 => ix[1] - 2,
                    _ => ix[1],
                };
                t[[ix[0], j]]
            })
        },
        "blocks 1 and 2 of axis 1 swapped (3 blocks)",
    );
}

#[test]
fn blocks_rotated_are_named_as_a_cyclic_shift() {
    // 4 hives, blocks of one row: block j holds block j − 1.
    reads(
        "hive, sensor",
        &[4, 6],
        1,
        |t, _, _| remap(t, |t, ix| t[[(ix[0] + 3) % 4, ix[1]]]),
        "blocks of axis 0 shifted by 1, cyclically (4 blocks)",
    );
}

// ---- factors --------------------------------------------------------------

#[test]
fn one_factor_per_row_is_a_per_slice_scale() {
    reads(
        "hive, sensor",
        &[4, 6],
        1,
        |t, _, _| remap(t, |t, ix| [0.5, 1.3, 2.1, 0.8][ix[0]] * t[[ix[0], ix[1]]]),
        "scaled per row of axis 0 (factors 0.5 to 2.1)",
    );
}

#[test]
fn one_row_scaled_alone_is_named_with_its_factor() {
    reads(
        "hive, sensor",
        &[4, 6],
        1,
        |t, _, _| {
            remap(
                t,
                |t, ix| if ix[0] == 2 { 3.0 } else { 1.0 } * t[[ix[0], ix[1]]],
            )
        },
        "row 2 scaled by 3",
    );
}

#[test]
fn a_gradient_multiplied_by_another_tensor_names_it() {
    // The shift gradient multiplied elementwise by γ (β inside the scale).
    reads(
        "hive, sensor",
        &[4, 6],
        3,
        |t, a, _| remap(t, |t, ix| t[[ix[0]]] * a.param(1)[[ix[0]]]),
        "multiplied by `gamma` elementwise",
    );
    // The weight gradient divided by γ along the sensor axis.
    reads(
        "hive, sensor",
        &[4, 6],
        1,
        |t, a, _| remap(t, |t, ix| t[[ix[0], ix[1]]] / a.param(1)[[ix[1]]]),
        "divided by `gamma` along axis 1",
    );
}

#[test]
fn square_root_factors_are_named_by_their_dim() {
    reads(
        "token, head_dim",
        &[4, 3],
        1,
        |t, _, _| t.map(|v| v / 3f64.sqrt()),
        "scaled by 1/√N (N = head_dim = 3)",
    );
    reads(
        "token, head_dim",
        &[4, 3],
        1,
        |t, _, _| t.map(|v| v * 3f64.sqrt()),
        "scaled by √N (N = head_dim = 3)",
    );
    reads(
        "token, width",
        &[3, 4],
        1,
        |t, _, _| t.map(|v| v * 2f64.sqrt()),
        "scaled by √2",
    );
}

// ---- signs on a subset ------------------------------------------------------

#[test]
fn a_sign_flipped_on_one_block_names_the_block() {
    reads(
        "hive, sensor",
        &[8, 3],
        1,
        |t, _, _| {
            remap(
                t,
                |t, ix| if ix[0] / 2 == 1 { -1.0 } else { 1.0 } * t[[ix[0], ix[1]]],
            )
        },
        "sign flipped on block 1 of 4 along axis 0 (6 of 24)",
    );
}

#[test]
fn a_sign_flipped_on_one_column_names_the_column() {
    reads(
        "hive, sensor",
        &[4, 6],
        1,
        |t, _, _| {
            remap(
                t,
                |t, ix| if ix[1] == 4 { -1.0 } else { 1.0 } * t[[ix[0], ix[1]]],
            )
        },
        "sign flipped on column 4 (4 of 24)",
    );
}

#[test]
fn a_sign_flipped_on_odd_indices_names_the_condition() {
    reads(
        "hive, sensor",
        &[4, 6],
        1,
        |t, _, _| {
            remap(
                t,
                |t, ix| if ix[1] % 2 == 1 { -1.0 } else { 1.0 } * t[[ix[0], ix[1]]],
            )
        },
        "sign flipped on odd indices of axis 1 (12 of 24)",
    );
}

#[test]
fn a_sign_flipped_above_the_diagonal_names_it() {
    reads(
        "hive, sensor",
        &[5, 5],
        1,
        |t, _, _| {
            remap(
                t,
                |t, ix| if ix[0] < ix[1] { -1.0 } else { 1.0 } * t[[ix[0], ix[1]]],
            )
        },
        "sign flipped on elements above the diagonal (10 of 25)",
    );
}

#[test]
fn a_sign_flipped_where_an_input_is_negative_names_the_input() {
    // |x| where x was meant: the sign of x lost in the chain rule.
    for text in said("hive, sensor", &[4, 6], 1, |t, a, _| {
        remap(t, |t, ix| {
            let sign = if a.input(0)[[ix[0], ix[1]]] < 0.0 {
                -1.0
            } else {
                1.0
            };
            sign * t[[ix[0], ix[1]]]
        })
    }) {
        assert!(
            text.starts_with("sign flipped on elements where `x` < 0 ("),
            "{text}"
        );
    }
}

// ---- partial failures with a pattern ---------------------------------------

#[test]
fn a_block_left_at_zero_is_partial_with_the_block() {
    reads(
        "hive, sensor",
        &[8, 3],
        1,
        |t, _, _| {
            remap(t, |t, ix| {
                if ix[0] / 2 == 3 {
                    0.0
                } else {
                    t[[ix[0], ix[1]]]
                }
            })
        },
        "partial: block 3 of 4 along axis 0 (6 of 24 wrong)",
    );
}

// ---- bugs that fit none: "wrong everywhere", never a wrong name --------------

#[test]
fn a_gradient_squared_is_wrong_everywhere_with_the_numbers_that_help() {
    for seed in 1..=4 {
        let row = row_of("hive, sensor", &[4, 6], 1, |t, _, _| t.map(|v| v * v), seed);
        let Some(Diagnosis::WrongValues {
            of,
            correlation,
            factor,
            unexplained,
        }) = row.diagnosis.clone()
        else {
            panic!("seed {seed}: {:?}", row.diagnosis);
        };
        assert_eq!(of, 24);
        // Pearson's correlation and the least-squares factor through the
        // origin, from their definitions (common practice), over the row's
        // own elements.
        let a: Vec<f64> = row.elements.iter().map(|e| e.analytic).collect();
        let n: Vec<f64> = row.elements.iter().map(|e| e.numeric).collect();
        let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
        let (ma, mn) = (mean(&a), mean(&n));
        let cov: f64 = a.iter().zip(&n).map(|(p, q)| (p - ma) * (q - mn)).sum();
        let va: f64 = a.iter().map(|p| (p - ma).powi(2)).sum();
        let vn: f64 = n.iter().map(|q| (q - mn).powi(2)).sum();
        assert_abs_diff_eq!(correlation, cov / (va * vn).sqrt(), epsilon = 1e-12);
        let k = a.iter().zip(&n).map(|(p, q)| p * q).sum::<f64>()
            / n.iter().map(|q| q * q).sum::<f64>();
        assert_relative_eq!(factor, k, epsilon = 1e-12, max_relative = 1e-12);
        let rest: f64 = a.iter().zip(&n).map(|(p, q)| (p - k * q).powi(2)).sum();
        let share = rest / a.iter().map(|p| p * p).sum::<f64>();
        assert_abs_diff_eq!(unexplained, share, epsilon = 1e-12);
        let text = row.diagnosis.unwrap().to_string();
        assert!(text.starts_with("wrong everywhere (24 of 24): no sign, factor, axis order or slice pattern fits; correlation "), "{text}");
        assert!(text.contains("% unexplained"), "{text}");
    }
}

#[test]
fn a_flip_and_a_factor_together_fit_no_single_fingerprint() {
    names_no_mechanism("hive, sensor", &[4, 6], 1, |t, _, _| {
        remap(t, |t, ix| 2.0 * t[[ix[0], 5 - ix[1]]])
    });
}

#[test]
fn a_cyclic_shift_over_five_blocks_is_not_forced_into_a_block_permutation() {
    // Blocks come in 2 to 4; five rows shifted by one fit none.
    names_no_mechanism("hive, sensor", &[5, 4], 1, |t, _, _| {
        remap(t, |t, ix| t[[(ix[0] + 4) % 5, ix[1]]])
    });
}

#[test]
fn a_shift_without_wrapping_is_not_a_permutation() {
    names_no_mechanism("hive, sensor", &[4, 6], 1, |t, _, _| {
        remap(t, |t, ix| {
            if ix[1] == 0 {
                0.0
            } else {
                t[[ix[0], ix[1] - 1]]
            }
        })
    });
}

#[test]
fn per_row_factors_with_one_percent_jitter_are_not_a_slice_scale() {
    names_no_mechanism("hive, sensor", &[4, 6], 1, |t, _, _| {
        remap(t, |t, ix| {
            let jitter = 1.0 + 0.01 * [1.0, -0.7, 0.4, -1.0, 0.8, -0.3][ix[1]];
            [0.5, 1.3, 2.1, 0.8][ix[0]] * jitter * t[[ix[0], ix[1]]]
        })
    });
}

#[test]
fn a_factor_close_to_another_tensor_but_not_equal_does_not_name_it() {
    names_no_mechanism("hive, sensor", &[4, 6], 3, |t, a, _| {
        remap(t, |t, ix| {
            t[[ix[0]]] * (a.param(1)[[ix[0]]] + [0.05, -0.04, 0.06, -0.05, 0.04, -0.06][ix[0]])
        })
    });
}

#[test]
fn factors_from_a_table_the_layer_does_not_have_are_not_named() {
    // One factor per element, from no tensor of the layer and constant
    // along no axis.
    names_no_mechanism("hive, sensor", &[4, 6], 1, |t, _, _| {
        remap(t, |t, ix| {
            (1.5 + 0.37 * ((ix[0] * 7 + ix[1] * 3) % 5) as f64) * t[[ix[0], ix[1]]]
        })
    });
}

#[test]
fn one_negated_element_is_partial_not_a_subset_sign() {
    for text in said("hive, sensor", &[4, 6], 1, |t, _, _| {
        remap(
            t,
            |t, ix| if ix == [1, 2] { -1.0 } else { 1.0 } * t[[ix[0], ix[1]]],
        )
    }) {
        assert_eq!(text, "partial: one element, [1, 2] (1 of 24 wrong)");
    }
}

#[test]
fn a_sign_error_on_one_term_of_a_sum_is_not_a_subset_sign() {
    // dγ[s] = Σ_h g·w·x with the sign of the first hive's term lost: every
    // element moves by a different amount, none is exactly negated.
    names_no_mechanism("hive, sensor", &[4, 6], 2, |t, a, g| {
        let (x, w) = (a.input(0), a.param(0));
        remap(t, |t, ix| {
            let s = ix[0];
            t[[s]] - 2.0 * g[[0, s]] * w[[0, s]] * x[[0, s]]
        })
    });
}

#[test]
fn two_negated_elements_without_a_pattern_are_partial_not_a_subset_sign() {
    // β over 6 sensors with sensors 0 and 3 negated: no slice, block,
    // parity or (with six elements) sign pattern describes them, and two
    // undescribed elements are too few to call a subset sign.
    for text in said("hive, sensor", &[4, 6], 3, |t, _, _| {
        remap(t, |t, ix| {
            if ix[0] == 0 || ix[0] == 3 {
                -t[[ix[0]]]
            } else {
                t[[ix[0]]]
            }
        })
    }) {
        assert!(text.starts_with("partial: scattered"), "{text}");
    }
}

/// Frost-hour weighting with one scalar sharpness parameter: y = κ·x².
/// The planted backward forgets the square in κ's gradient (Σ g·x in place
/// of Σ g·x²).
struct FrostSharpness;

impl Layer for FrostSharpness {
    type Real = f64;
    fn signature(&self) -> Signature {
        Signature::new()
            .input("x", "hour")
            .param("kappa", "")
            .output("y", "hour")
    }
    fn backward(&self, a: &Args<f64>, up: &[Tensor<f64>]) -> Gradients<f64> {
        let (x, k, g) = (a.input(0), a.param(0).data()[0], &up[0]);
        let dx = Tensor::from_fn(x.shape().to_vec(), |ix| 2.0 * k * x[ix] * g[ix]);
        let dk: f64 = x.data().iter().zip(g.data()).map(|(x, g)| x * g).sum();
        Gradients::from(vec![dx, Tensor::new(vec![], vec![dk]).unwrap()])
    }
}

impl GenericForward for FrostSharpness {
    fn forward_generic<T: Scalar>(&self, a: &Args<T>) -> Vec<Tensor<T>> {
        let k = a.param(0).data()[0];
        vec![a.input(0).map(|x| k * x * x)]
    }
}

#[test]
fn a_wrong_scalar_reads_as_a_wrong_value_with_its_ratio_not_as_a_pattern() {
    // One element: every factor "fits" it and no pattern can, so the text
    // gives the ratio of analytic to numeric instead of a correlation
    // (undefined for one point).
    let x = Tensor::new(vec![3], vec![0.3, 1.7, -0.9]).unwrap();
    let k = Tensor::new(vec![], vec![1.3]).unwrap();
    let r = Audit::new()
        .run(&FrostSharpness, &Args::new(vec![x], vec![k]))
        .unwrap();
    let row = r.row("kappa").unwrap();
    let e = &row.elements[0];
    let text = row.diagnosis.as_ref().unwrap().to_string();
    assert!(!r.passed(), "{r}");
    let number = text
        .strip_prefix("wrong value (1 of 1): ")
        .and_then(|t| t.strip_suffix(" times the reference"))
        .unwrap_or_else(|| panic!("expected a wrong value with its ratio, got {text}\n{r}"));
    // Σg·x over Σg·x² for these x and the audit's upstream weights: the
    // number shown is the ratio of the row's own values, to its digits.
    let shown: f64 = number.parse().unwrap();
    let ratio = e.analytic / e.numeric;
    assert!(
        relative_eq!(shown, ratio, max_relative = 0.01),
        "{text} vs {ratio}"
    );
}
