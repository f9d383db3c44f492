//! Structured fingerprints: the right values in the wrong places (axes
//! reversed, blocks permuted), one factor per slice or per element of
//! another tensor, signs flipped on a describable subset, and the numbers
//! that help next when nothing fits.
//!
//! Every fingerprint is fitted to the analytic-versus-numeric comparison
//! of the checked elements (elements at a kink are skipped) and is named
//! only when it explains *every* element within its bound (plus the small
//! relative slack [`FACTOR_MATCH`] where a factor is fitted) and enough
//! elements to mean something ([`MIN_EVIDENCE`]): a confident wrong name
//! is worse than "wrong everywhere".

use crate::compare::ElementCheck;
use crate::format::short;
use crate::tensor::{MultiIndex, Tensor};

use super::{Diagnosis, FACTOR_MATCH};

/// Fewest failing elements a fingerprint must explain before it is named.
pub(super) const MIN_EVIDENCE: usize = 3;

/// An element's ratio analytic/numeric is *pinned* when its bound is below
/// this share of |numeric|: the ratio is then known to about 1%.
const PIN: f64 = 0.01;

/// Factors closer to 1 than this are not called a scaling (the tiny
/// mismatches are [`Diagnosis::SmallMismatch`]'s).
const UNIT: f64 = 0.01;

/// Factors below this in magnitude read as "missing", not as a scaling.
const NEAR_ZERO: f64 = 0.01;

/// Most axes whose subsets are tried for a reversal (2⁸ − 1 subsets).
const MAX_FLIP_AXES: usize = 8;

/// Which side of a diagonal: a condition on two indices.
type Side = fn(usize, usize) -> bool;

/// A factor tensor's value at a multi-index of the row's tensor.
type Lookup = Box<dyn Fn(&[usize]) -> Option<f64>>;

/// Another tensor of the layer, by name, with its values (plain data: the
/// diagnosis never calls the layer).
pub(crate) type NamedValues = (String, Tensor<f64>);

fn pinned(e: &ElementCheck) -> bool {
    e.numeric != 0.0 && e.bound < PIN * e.numeric.abs()
}

fn multi(shape: &[usize], e: &ElementCheck) -> Vec<usize> {
    MultiIndex::from_flat(shape, e.index).0
}

/// `a ≈ k·n` for one element: within its bound (scaled by |k| when above
/// 1) plus [`FACTOR_MATCH`] relative.
fn fits_factor(e: &ElementCheck, k: f64) -> bool {
    let slack = e.bound * k.abs().max(1.0) + FACTOR_MATCH * (k * e.numeric).abs();
    (e.analytic - k * e.numeric).abs() <= slack
}

/// When every element's numeric value sits in the gradient at the moved
/// position (`moved` rewrites a multi-index), the number of failing
/// elements this explains; `None` when some element does not fit.
fn moved_fit(
    shape: &[usize],
    grad: &Tensor<f64>,
    el: &[ElementCheck],
    moved: impl Fn(&mut [usize]),
) -> Option<usize> {
    let mut explained = 0;
    for e in el.iter().filter(|e| !e.status.is_kink()) {
        let mut ix = multi(shape, e);
        moved(&mut ix);
        let a = grad.get(&ix)?;
        // NaN never fits.
        let within = (a - e.numeric).abs() <= e.bound;
        if !within {
            return None;
        }
        explained += usize::from(e.status.is_failure());
    }
    Some(explained)
}

/// The gradient matches the reference with one or more axes reversed
/// (index i read as n − 1 − i): the fewest axes that fit.
pub(super) fn flipped(
    shape: &[usize],
    grad: &Tensor<f64>,
    el: &[ElementCheck],
) -> Option<Diagnosis> {
    if grad.shape() != shape {
        return None;
    }
    let axes: Vec<usize> = (0..shape.len())
        .filter(|&a| shape[a] >= 2)
        .take(MAX_FLIP_AXES)
        .collect();
    let mut subsets: Vec<Vec<usize>> = (1u32..1 << axes.len())
        .map(|mask| {
            axes.iter()
                .enumerate()
                .filter(|(b, _)| mask >> b & 1 == 1)
                .map(|(_, &a)| a)
                .collect()
        })
        .collect();
    subsets.sort_by_key(Vec::len);
    subsets.into_iter().find_map(|s| {
        let n = moved_fit(shape, grad, el, |ix| {
            for &a in &s {
                ix[a] = shape[a] - 1 - ix[a];
            }
        })?;
        (n >= MIN_EVIDENCE).then_some(Diagnosis::Flipped { axes: s })
    })
}

/// Every permutation of `k` items but the identity, those that move the
/// fewest items first (swaps before cycles), then in lexicographic order.
fn permutations(k: usize) -> Vec<Vec<usize>> {
    fn extend(prefix: &mut Vec<usize>, k: usize, out: &mut Vec<Vec<usize>>) {
        if prefix.len() == k {
            out.push(prefix.clone());
            return;
        }
        for v in 0..k {
            if !prefix.contains(&v) {
                prefix.push(v);
                extend(prefix, k, out);
                prefix.pop();
            }
        }
    }
    let mut out = Vec::new();
    extend(&mut Vec::new(), k, &mut out);
    let moved = |p: &Vec<usize>| p.iter().enumerate().filter(|(j, &v)| *j != v).count();
    out.retain(|p| moved(p) > 0);
    out.sort_by_key(moved);
    out
}

/// An axis split into k = 2..4 equal blocks, the blocks permuted: block j
/// of the gradient holds block `order[j]` of the reference.
pub(super) fn blocks_permuted(
    shape: &[usize],
    grad: &Tensor<f64>,
    el: &[ElementCheck],
) -> Option<Diagnosis> {
    if grad.shape() != shape {
        return None;
    }
    for axis in 0..shape.len() {
        let len = shape[axis];
        for k in 2..=4 {
            if len < k || !len.is_multiple_of(k) {
                continue;
            }
            let b = len / k;
            for order in permutations(k) {
                let mut inv = vec![0; k];
                for (j, &m) in order.iter().enumerate() {
                    inv[m] = j;
                }
                let n = moved_fit(shape, grad, el, |ix| {
                    let (m, r) = (ix[axis] / b, ix[axis] % b);
                    ix[axis] = inv[m] * b + r;
                });
                if n.is_some_and(|n| n >= MIN_EVIDENCE) {
                    return Some(Diagnosis::BlocksPermuted {
                        axis,
                        blocks: k,
                        order,
                    });
                }
            }
        }
    }
    None
}

/// Names a set of elements (`inside`, as multi-indices) against the rest
/// (`outside`) by the first simple index condition that separates them
/// exactly: one slice, one block, even or odd indices, one side of a
/// diagonal, several slices, or the sign of another tensor of the same
/// shape. `None` when nothing simple does.
pub(super) fn describe(
    shape: &[usize],
    inside: &[Vec<usize>],
    outside: &[Vec<usize>],
    tensors: &[NamedValues],
) -> Option<String> {
    if inside.is_empty() || outside.is_empty() {
        return None;
    }
    let separates = |p: &dyn Fn(&[usize]) -> bool| {
        inside.iter().all(|ix| p(ix)) && !outside.iter().any(|ix| p(ix))
    };
    let rank = shape.len();
    let slice_word = |axis: usize| match (rank, axis) {
        (2, 0) => "row",
        (2, 1) => "column",
        _ => "slice",
    };
    let of_axis = |axis: usize| {
        if rank == 2 {
            String::new()
        } else {
            format!(" of axis {axis}")
        }
    };
    // One slice.
    for axis in 0..rank {
        let v = inside[0][axis];
        if shape[axis] >= 2 && separates(&|ix| ix[axis] == v) {
            return Some(format!("{} {v}{}", slice_word(axis), of_axis(axis)));
        }
    }
    // One block of k = 2..4 (blocks of at least two slices).
    for axis in 0..rank {
        let len = shape[axis];
        for k in 2..=4 {
            if !len.is_multiple_of(k) || len / k < 2 {
                continue;
            }
            let b = len / k;
            let j = inside[0][axis] / b;
            if separates(&|ix| ix[axis] / b == j) {
                return Some(format!("block {j} of {k} along axis {axis}"));
            }
        }
    }
    // Even or odd indices.
    for axis in 0..rank {
        let p = inside[0][axis] % 2;
        if shape[axis] >= 3 && separates(&|ix| ix[axis] % 2 == p) {
            let which = if p == 0 { "even" } else { "odd" };
            return Some(format!("{which} indices of axis {axis}"));
        }
    }
    // One side of a diagonal of two axes of equal length.
    for p in 0..rank {
        for q in p + 1..rank {
            if shape[p] != shape[q] || shape[p] < 2 {
                continue;
            }
            let axes = if rank == 2 {
                String::new()
            } else {
                format!(" of axes {p}, {q}")
            };
            let sides: [(&str, Side); 4] = [
                ("the diagonal", |i, j| i == j),
                ("elements off the diagonal", |i, j| i != j),
                ("elements above the diagonal", |i, j| i < j),
                ("elements below the diagonal", |i, j| i > j),
            ];
            for (text, side) in sides {
                if separates(&|ix| side(ix[p], ix[q])) {
                    return Some(format!("{text}{axes}"));
                }
            }
        }
    }
    // Several whole slices of one axis, each with two elements at least
    // (slices of one element would only list the elements).
    for axis in (0..rank).filter(|_| rank >= 2) {
        let mut values: Vec<usize> = inside.iter().map(|ix| ix[axis]).collect();
        values.sort_unstable();
        let singles = values.chunk_by(|p, q| p == q).any(|run| run.len() < 2);
        values.dedup();
        if !singles && values.len() >= 2 && separates(&|ix| values.contains(&ix[axis])) {
            let list: Vec<String> = values.iter().map(usize::to_string).collect();
            return Some(format!(
                "{}s {}{}",
                slice_word(axis),
                list.join(", "),
                of_axis(axis)
            ));
        }
    }
    // Where another tensor of the same shape is negative or positive; with
    // few elements a sign pattern matches by chance, so ask for eight.
    let enough = inside.len() + outside.len() >= 8;
    for (name, t) in tensors.iter().filter(|(_, t)| enough && t.shape() == shape) {
        let value = |ix: &[usize]| t.get(ix).unwrap_or(f64::NAN);
        if separates(&|ix| value(ix) < 0.0) {
            return Some(format!("elements where `{name}` < 0"));
        }
        if separates(&|ix| value(ix) > 0.0) {
            return Some(format!("elements where `{name}` > 0"));
        }
    }
    None
}

/// Signs flipped on part of the tensor: every element is either right or
/// exactly negated, at least two are negated and at least one is right.
pub(super) fn sign_on_subset(
    shape: &[usize],
    smooth: &[ElementCheck],
    tensors: &[NamedValues],
) -> Option<Diagnosis> {
    let (mut flipped, mut kept) = (Vec::new(), Vec::new());
    for e in smooth {
        let plus = (e.analytic - e.numeric).abs() <= e.bound;
        let minus = fits_factor(e, -1.0);
        match (plus, minus) {
            (true, true) => {}
            (true, false) => kept.push(multi(shape, e)),
            (false, true) => flipped.push(multi(shape, e)),
            (false, false) => return None,
        }
    }
    if flipped.len() < 2 || kept.is_empty() || flipped.len() + kept.len() < MIN_EVIDENCE + 1 {
        return None;
    }
    let subset = match describe(shape, &flipped, &kept, tensors) {
        Some(s) => s,
        // Without a describable subset, ask for more evidence.
        None if flipped.len() >= MIN_EVIDENCE => "scattered elements".to_string(),
        None => return None,
    };
    Some(Diagnosis::SignFlippedOn {
        subset,
        flipped: flipped.len(),
        of: smooth.len(),
    })
}

/// Where a factor tensor sits against the row's tensor: its flat position
/// for each multi-index of the row's tensor, and the words for it.
struct Placement {
    text: String,
    at: Lookup,
}

fn placements(shape: &[usize], t: &Tensor<f64>) -> Vec<Placement> {
    let rank = shape.len();
    let ts = t.shape().to_vec();
    let mut out = Vec::new();
    if t.len() < 2 {
        return out;
    }
    if ts == shape {
        let t = t.clone();
        out.push(Placement {
            text: "elementwise".to_string(),
            at: Box::new(move |ix| t.get(ix)),
        });
        return out;
    }
    if ts.len() == 1 && rank >= 2 {
        for axis in (0..rank).filter(|&a| shape[a] == ts[0]) {
            let t = t.clone();
            out.push(Placement {
                text: format!("along axis {axis}"),
                at: Box::new(move |ix| t.get(&ix[axis..=axis])),
            });
        }
    }
    let m = ts.len();
    if m >= 2 && m < rank && shape[rank - m..] == ts[..] {
        let t = t.clone();
        out.push(Placement {
            text: format!("elementwise over the last {m} axes"),
            at: Box::new(move |ix| t.get(&ix[rank - m..])),
        });
    }
    out
}

/// The gradient is the reference multiplied (or divided) by the values of
/// another tensor of the layer, elementwise or broadcast along an axis.
pub(super) fn scaled_by_tensor(
    shape: &[usize],
    smooth: &[ElementCheck],
    tensors: &[NamedValues],
) -> Option<Diagnosis> {
    for (name, t) in tensors {
        for place in placements(shape, t) {
            for divided in [false, true] {
                let factor = |e: &ElementCheck| {
                    let v = (place.at)(&multi(shape, e))?;
                    let k = if divided { 1.0 / v } else { v };
                    k.is_finite().then_some(k)
                };
                let mut evidence = 0;
                let (mut lo, mut hi) = (f64::INFINITY, 0.0_f64);
                let fits = smooth.iter().all(|e| {
                    let Some(k) = factor(e) else { return false };
                    if pinned(e) && k != 0.0 {
                        lo = lo.min(k.abs());
                        hi = hi.max(k.abs());
                        evidence += usize::from(e.status.is_failure());
                    }
                    fits_factor(e, k)
                });
                // Factors that barely vary are a common factor, not a tensor.
                if fits && evidence >= MIN_EVIDENCE && hi > lo * 1.05 {
                    return Some(Diagnosis::ScaledByTensor {
                        tensor: name.clone(),
                        divided,
                        placement: place.text,
                    });
                }
            }
        }
    }
    None
}

/// One factor per slice along an axis, fitted slice by slice: each slice
/// with a wrong element needs two pinned elements that agree on its
/// factor, and every element must fit its slice's factor.
pub(super) fn scaled_per_slice(shape: &[usize], smooth: &[ElementCheck]) -> Option<Diagnosis> {
    let rank = shape.len();
    'axes: for axis in 0..rank {
        let len = shape[axis];
        if len < 2 || rank < 2 {
            continue;
        }
        let mut slices: Vec<Vec<&ElementCheck>> = vec![Vec::new(); len];
        for e in smooth {
            slices[multi(shape, e)[axis]].push(e);
        }
        let mut factors: Vec<Option<f64>> = vec![None; len];
        let mut evidence = 0;
        for (slice, factor) in slices.iter().zip(factors.iter_mut()) {
            let wrong = slice.iter().filter(|e| e.status.is_failure()).count();
            let mut ratios: Vec<f64> = slice
                .iter()
                .filter(|e| pinned(e))
                .map(|e| e.analytic / e.numeric)
                .collect();
            if wrong == 0 {
                if !ratios.is_empty() {
                    *factor = Some(1.0);
                }
                continue;
            }
            if ratios.len() < 2 {
                continue 'axes;
            }
            ratios.sort_by(f64::total_cmp);
            let k = ratios[ratios.len() / 2];
            if !k.is_finite() || k.abs() < NEAR_ZERO || !slice.iter().all(|e| fits_factor(e, k)) {
                continue 'axes;
            }
            evidence += wrong;
            *factor = Some(k);
        }
        let known: Vec<f64> = factors.iter().flatten().copied().collect();
        let lo = known.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = known.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let off_unit = known.iter().any(|k| (k - 1.0).abs() > UNIT);
        let varies = hi - lo > FACTOR_MATCH * hi.abs().max(lo.abs());
        if evidence >= MIN_EVIDENCE && off_unit && varies {
            return Some(Diagnosis::ScaledPerSlice {
                axis,
                rank,
                factors,
            });
        }
    }
    None
}

/// The numbers for "wrong everywhere": Pearson's correlation of analytic
/// with numeric, the least-squares factor k of analytic ≈ k·numeric, and
/// the share Σ(a − k·n)²/Σa² it leaves unexplained (NaN where undefined).
pub(super) fn guidance(smooth: &[ElementCheck]) -> (f64, f64, f64) {
    let pairs: Vec<(f64, f64)> = smooth
        .iter()
        .map(|e| (e.analytic, e.numeric))
        .filter(|(a, n)| a.is_finite() && n.is_finite())
        .collect();
    let len = pairs.len() as f64;
    if pairs.is_empty() {
        return (f64::NAN, f64::NAN, f64::NAN);
    }
    let (ma, mn) = (
        pairs.iter().map(|p| p.0).sum::<f64>() / len,
        pairs.iter().map(|p| p.1).sum::<f64>() / len,
    );
    let (mut saa, mut snn, mut san) = (0.0, 0.0, 0.0);
    let (mut aa, mut nn, mut an) = (0.0, 0.0, 0.0);
    for &(a, n) in &pairs {
        saa += (a - ma) * (a - ma);
        snn += (n - mn) * (n - mn);
        san += (a - ma) * (n - mn);
        aa += a * a;
        nn += n * n;
        an += a * n;
    }
    let correlation = if saa > 0.0 && snn > 0.0 {
        san / (saa * snn).sqrt()
    } else {
        f64::NAN
    };
    let factor = if nn > 0.0 { an / nn } else { f64::NAN };
    let unexplained = if aa > 0.0 && factor.is_finite() {
        let rest: f64 = pairs.iter().map(|&(a, n)| (a - factor * n).powi(2)).sum();
        (rest / aa).min(1.0)
    } else {
        f64::NAN
    };
    (correlation, factor, unexplained)
}

/// The words for slice `v` of `axis` in a tensor of rank `rank`.
pub(super) fn slice_name(rank: usize, axis: usize, v: usize) -> String {
    match (rank, axis) {
        (2, 0) => format!("row {v}"),
        (2, 1) => format!("column {v}"),
        _ => format!("slice {v} of axis {axis}"),
    }
}

/// `scaled per row of axis 0 (factors 0.5 to 2.1)`, or `row 2 scaled by 2`
/// when only one slice is off.
pub(super) fn per_slice_text(axis: usize, rank: usize, factors: &[Option<f64>]) -> String {
    let off: Vec<(usize, f64)> = factors
        .iter()
        .enumerate()
        .filter_map(|(v, k)| k.filter(|k| (k - 1.0).abs() > UNIT).map(|k| (v, k)))
        .collect();
    if off.len() == 1 {
        return format!(
            "{} scaled by {}",
            slice_name(rank, axis, off[0].0),
            short(off[0].1)
        );
    }
    let known: Vec<f64> = factors.iter().flatten().copied().collect();
    let lo = known.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = known.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let word = match (rank, axis) {
        (2, 0) => "row",
        (2, 1) => "column",
        _ => "slice",
    };
    format!(
        "scaled per {word} of axis {axis} (factors {} to {})",
        short(lo),
        short(hi)
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::diagnosis::tests::el;

    #[test]
    fn nothing_is_described_against_an_empty_rest() {
        // Internal logic (`describe`): a condition must separate the set
        // from the rest, and with no rest there is nothing to separate.
        let inside = [vec![0, 0], vec![0, 1]];
        assert_eq!(describe(&[2, 2], &inside, &[], &[]), None);
        assert_eq!(
            describe(&[2, 2], &inside, &[vec![1, 0], vec![1, 1]], &[]),
            Some("row 0".to_string())
        );
    }

    #[test]
    fn blocks_of_three_slices_are_named() {
        // Indices 0–2 of 6 against 3–5: block 0 of 2 (blocks of at least
        // two slices; here three).
        let inside: Vec<Vec<usize>> = (0..3).map(|i| vec![i]).collect();
        let outside: Vec<Vec<usize>> = (3..6).map(|i| vec![i]).collect();
        assert_eq!(
            describe(&[6], &inside, &outside, &[]),
            Some("block 0 of 2 along axis 0".to_string())
        );
    }

    #[test]
    fn several_whole_rows_are_listed() {
        // Rows 0 and 3 of a 4×2 tensor against rows 1 and 2: no single row,
        // block, parity or diagonal separates them; the list of whole rows
        // does.
        let rows = |rs: &[usize]| -> Vec<Vec<usize>> {
            rs.iter().flat_map(|&r| [vec![r, 0], vec![r, 1]]).collect()
        };
        assert_eq!(
            describe(&[4, 2], &rows(&[0, 3]), &rows(&[1, 2]), &[]),
            Some("rows 0, 3".to_string())
        );
    }

    #[test]
    fn only_pinned_ratios_fit_a_slice_factor() {
        // Internal logic (`scaled_per_slice`, `pinned`): a ratio counts when
        // the bound is below 1% of |numeric|. Row 0 of a 2×5 tensor: factor
        // 2 on two pinned elements, three tiny references (1e-9, bound 1e-6:
        // not pinned) read 0 and agree; row 1: factor 0.5 throughout.
        let mut smooth = vec![el(0, 2.0, 1.0), el(1, 4.0, 2.0)];
        smooth.extend((2..5).map(|j| el(j, 0.0, 1e-9)));
        smooth.extend((5..10).map(|j| el(j, 0.5 * j as f64, j as f64)));
        assert_eq!(
            scaled_per_slice(&[2, 5], &smooth),
            Some(Diagnosis::ScaledPerSlice {
                axis: 0,
                rank: 2,
                factors: vec![Some(2.0), Some(0.5)],
            })
        );
    }

    #[test]
    fn a_subset_sign_needs_four_elements() {
        // Internal logic (`sign_on_subset`): at least two flipped, one kept,
        // and MIN_EVIDENCE + 1 = 4 elements in all. Row 0 of a 2×2 tensor
        // flipped, one element of row 1 right: three, too few.
        let three = [el(0, -1.0, 1.0), el(1, -2.0, 2.0), el(2, 3.0, 3.0)];
        assert_eq!(sign_on_subset(&[2, 2], &three, &[]), None);
        let four = [
            el(0, -1.0, 1.0),
            el(1, -2.0, 2.0),
            el(2, 3.0, 3.0),
            el(3, 4.0, 4.0),
        ];
        assert_eq!(
            sign_on_subset(&[2, 2], &four, &[]),
            Some(Diagnosis::SignFlippedOn {
                subset: "row 0".to_string(),
                flipped: 2,
                of: 4
            })
        );
    }

    #[test]
    fn a_tensor_matching_the_last_axes_is_placed_over_them() {
        // Internal logic (`placements`): a 2×3 tensor against a rank-5
        // tensor of shape 1×1×1×2×3 lines up with its last two axes.
        let t = Tensor::new(vec![2, 3], (0..6).map(f64::from).collect()).unwrap();
        let p = placements(&[1, 1, 1, 2, 3], &t);
        let texts: Vec<&str> = p.iter().map(|p| p.text.as_str()).collect();
        assert_eq!(texts, ["elementwise over the last 2 axes"]);
        assert_eq!((p[0].at)(&[0, 0, 0, 1, 2]), Some(5.0));
    }

    #[test]
    fn slice_factors_must_vary_and_any_rank_from_two_is_tried() {
        // Internal logic (`scaled_per_slice`): rows of a 2×3×1 tensor with
        // factors 2 and 0.5 are a per-slice scale along axis 0; one factor
        // 2 on both rows is a common factor, not a per-slice one.
        let rows = |k0: f64, k1: f64| -> Vec<ElementCheck> {
            (0..6)
                .map(|j| {
                    let n = 1.0 + j as f64;
                    el(j, if j < 3 { k0 } else { k1 } * n, n)
                })
                .collect()
        };
        assert_eq!(
            scaled_per_slice(&[2, 3, 1], &rows(2.0, 0.5)),
            Some(Diagnosis::ScaledPerSlice {
                axis: 0,
                rank: 3,
                factors: vec![Some(2.0), Some(0.5)],
            })
        );
        assert_eq!(scaled_per_slice(&[2, 3, 1], &rows(2.0, 2.0)), None);
        // Factors within 1% of 1 (UNIT) are small mismatches, not scalings,
        // even when they differ from row to row.
        assert_eq!(scaled_per_slice(&[2, 3, 1], &rows(1.005, 0.995)), None);
    }

    #[test]
    fn slices_of_a_matrix_are_rows_and_columns() {
        assert_eq!(slice_name(2, 0, 1), "row 1");
        assert_eq!(slice_name(2, 1, 4), "column 4");
        assert_eq!(slice_name(3, 1, 0), "slice 0 of axis 1");
    }
}
