//! Order statistics for per-element figures.

use std::cmp::Ordering;

use serde::{Deserialize, Serialize};

/// Median, 10th and 90th percentiles, minimum and maximum of a figure.
#[derive(Clone, Copy, Debug, Default, Serialize, Deserialize, PartialEq)]
pub struct Spread {
    pub median: f64,
    pub p10: f64,
    pub p90: f64,
    pub min: f64,
    pub max: f64,
}

/// Linear-interpolated quantile (the "type 7" definition, numpy's default) of sorted data.
pub fn quantile_sorted(s: &[f64], q: f64) -> f64 {
    if s.is_empty() {
        return f64::NAN;
    }
    let h = (s.len() - 1) as f64 * q.clamp(0.0, 1.0);
    let lo = h.floor() as usize;
    let hi = h.ceil() as usize;
    s[lo] + (h - lo as f64) * (s[hi] - s[lo])
}

/// Median of the finite values (the type-7 quantile at 0.5); NaN when
/// there are none. Found by selection (Hoare's quickselect, as
/// `select_nth_unstable`), O(n) rather than a sort's O(n log n); the two
/// middle order statistics are the sorted ones, so the result is the
/// sorted-data median bit for bit.
pub fn median(v: &[f64]) -> f64 {
    let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
    if s.is_empty() {
        return f64::NAN;
    }
    let n = s.len();
    let h = (n - 1) as f64 * 0.5;
    let (lo, hi) = (h.floor() as usize, h.ceil() as usize);
    let (left, x_hi, _) = s.select_nth_unstable_by(hi, |a, b| a.total_cmp(b));
    let x_hi = *x_hi;
    let x_lo = if lo == hi {
        x_hi
    } else {
        left.iter().copied().fold(f64::NEG_INFINITY, |m, x| {
            if x.total_cmp(&m).is_gt() {
                x
            } else {
                m
            }
        })
    };
    x_lo + (h - lo as f64) * (x_hi - x_lo)
}

/// Weighted median: the value x where the weight of the values below x is
/// under half the total and the weight of those up to x reaches it.
/// Weighted quickselect (three-way partition about a median-of-three
/// pivot, then into the side that holds the half-weight point): O(n)
/// expected. The sums run in another order than a sort-and-accumulate's,
/// so a total landing within rounding of the half-way point may pick the
/// neighbouring value; otherwise the two agree exactly.
pub fn weighted_median(values: &[f64], weights: &[f64]) -> f64 {
    // Each value as its `total_cmp` key, so every comparison below is one
    // integer comparison; the same decisions, swaps and sums as comparing
    // the values by `total_cmp` (`weighted_median_total_cmp`, the test
    // oracle), so the same result bit for bit.
    let mut p: Vec<(i64, f64)> = values
        .iter()
        .zip(weights)
        .filter(|(v, w)| v.is_finite() && **w > 0.0)
        .map(|(v, w)| (order_key(*v), *w))
        .collect();
    if p.is_empty() {
        return f64::NAN;
    }
    let half = p.iter().map(|x| x.1).sum::<f64>() / 2.0;
    let mut below = 0.0;
    let mut part: &mut [(i64, f64)] = &mut p;
    loop {
        let n = part.len();
        if n == 1 {
            return from_order_key(part[0].0);
        }
        let mut three = [part[0].0, part[n / 2].0, part[n - 1].0];
        three.sort_unstable();
        let pivot = three[1];
        // Dutch national flag: [0, lt) below, [lt, gt) equal, [gt, n) above.
        let (mut lt, mut i, mut gt) = (0, 0, n);
        while i < gt {
            match part[i].0.cmp(&pivot) {
                Ordering::Less => {
                    part.swap(lt, i);
                    lt += 1;
                    i += 1;
                }
                Ordering::Greater => {
                    gt -= 1;
                    part.swap(i, gt);
                }
                Ordering::Equal => i += 1,
            }
        }
        let w_lt: f64 = part[..lt].iter().map(|x| x.1).sum();
        if below + w_lt >= half {
            part = &mut part[..lt];
            continue;
        }
        let w_eq: f64 = part[lt..gt].iter().map(|x| x.1).sum();
        if below + w_lt + w_eq >= half || gt == n {
            return from_order_key(pivot);
        }
        below += w_lt + w_eq;
        part = &mut part[gt..];
    }
}

/// The integer whose order is `f64::total_cmp`'s (the same bit flip).
fn order_key(x: f64) -> i64 {
    let b = x.to_bits() as i64;
    b ^ (((b >> 63) as u64) >> 1) as i64
}

/// Inverse of `order_key` (the flip leaves the sign bit, so it undoes itself).
fn from_order_key(k: i64) -> f64 {
    f64::from_bits((k ^ (((k >> 63) as u64) >> 1) as i64) as u64)
}

/// (value, weight) pairs with a finite value and a positive weight.
#[cfg(test)]
fn usable_pairs(values: &[f64], weights: &[f64]) -> Vec<(f64, f64)> {
    values
        .iter()
        .zip(weights)
        .filter(|(v, w)| v.is_finite() && **w > 0.0)
        .map(|(v, w)| (*v, *w))
        .collect()
}

/// The spread of the finite values, or None when there are none.
pub fn spread(v: &[f64]) -> Option<Spread> {
    let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
    if s.is_empty() {
        return None;
    }
    s.sort_by(|a, b| a.total_cmp(b));
    Some(Spread {
        median: quantile_sorted(&s, 0.5),
        p10: quantile_sorted(&s, 0.1),
        p90: quantile_sorted(&s, 0.9),
        min: s[0],
        max: s[s.len() - 1],
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn quantiles_match_numpy_type7() {
        // numpy.percentile([1,2,3,4,10], [10,50,90]) = [1.4, 3.0, 7.6] (numpy default, linear).
        let s = spread(&[4.0, 1.0, 10.0, 3.0, 2.0]).unwrap();
        assert!((s.p10 - 1.4).abs() < 1e-12);
        assert!((s.median - 3.0).abs() < 1e-12);
        assert!((s.p90 - 7.6).abs() < 1e-12);
        assert_eq!((s.min, s.max), (1.0, 10.0));
    }
    /// The sort-and-accumulate definitions the selections replace.
    fn median_sorted(v: &[f64]) -> f64 {
        let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
        s.sort_by(|a, b| a.total_cmp(b));
        quantile_sorted(&s, 0.5)
    }

    fn weighted_median_sorted(values: &[f64], weights: &[f64]) -> f64 {
        let mut p = usable_pairs(values, weights);
        if p.is_empty() {
            return f64::NAN;
        }
        p.sort_by(|a, b| a.0.total_cmp(&b.0));
        let total: f64 = p.iter().map(|x| x.1).sum();
        let mut acc = 0.0;
        for (v, w) in &p {
            acc += w;
            if acc >= total / 2.0 {
                return *v;
            }
        }
        p[p.len() - 1].0
    }

    /// The weighted quickselect comparing values by `total_cmp`: the code
    /// `weighted_median` was derived from; test oracle.
    fn weighted_median_total_cmp(values: &[f64], weights: &[f64]) -> f64 {
        let mut p = usable_pairs(values, weights);
        if p.is_empty() {
            return f64::NAN;
        }
        let half = p.iter().map(|x| x.1).sum::<f64>() / 2.0;
        let mut below = 0.0;
        let mut part: &mut [(f64, f64)] = &mut p;
        loop {
            let n = part.len();
            if n == 1 {
                return part[0].0;
            }
            let mut three = [part[0].0, part[n / 2].0, part[n - 1].0];
            three.sort_by(|a, b| a.total_cmp(b));
            let pivot = three[1];
            // Dutch national flag: [0, lt) below, [lt, gt) equal, [gt, n) above.
            let (mut lt, mut i, mut gt) = (0, 0, n);
            while i < gt {
                match part[i].0.total_cmp(&pivot) {
                    Ordering::Less => {
                        part.swap(lt, i);
                        lt += 1;
                        i += 1;
                    }
                    Ordering::Greater => {
                        gt -= 1;
                        part.swap(i, gt);
                    }
                    Ordering::Equal => i += 1,
                }
            }
            let w_lt: f64 = part[..lt].iter().map(|x| x.1).sum();
            if below + w_lt >= half {
                part = &mut part[..lt];
                continue;
            }
            let w_eq: f64 = part[lt..gt].iter().map(|x| x.1).sum();
            if below + w_lt + w_eq >= half || gt == n {
                return pivot;
            }
            below += w_lt + w_eq;
            part = &mut part[gt..];
        }
    }

    #[test]
    fn selection_medians_equal_the_sorted_definitions() {
        // Slow obvious oracle: sort, then accumulate. Lengths 1..300, odd and
        // even, with repeated values (coarse grid), NaN, infinities, -0.0
        // and zero or negative weights mixed in.
        let mut seed = 0x2545_f491_4f6c_dd1du64;
        let mut next = || {
            seed ^= seed << 13;
            seed ^= seed >> 7;
            seed ^= seed << 17;
            (seed >> 11) as f64 / (1u64 << 53) as f64
        };
        for len in (1..300).chain([1000, 1001]) {
            for round in 0..3 {
                let v: Vec<f64> = (0..len)
                    .map(|i| match (i * 7 + round) % 23 {
                        0 => f64::NAN,
                        1 => f64::INFINITY,
                        2 => -0.0,
                        _ if round == 1 => (next() * 8.0).floor() - 4.0,
                        _ => next() * 200.0 - 100.0,
                    })
                    .collect();
                let w: Vec<f64> = (0..len)
                    .map(|i| match (i * 5 + round) % 17 {
                        0 => 0.0,
                        1 => -1.0,
                        _ => next() * 3.0,
                    })
                    .collect();
                let (a, b) = (median(&v), median_sorted(&v));
                assert!(
                    a.to_bits() == b.to_bits() || (a.is_nan() && b.is_nan()),
                    "{len}: {a} {b}"
                );
                let (a, b) = (weighted_median(&v, &w), weighted_median_sorted(&v, &w));
                assert!(
                    a.to_bits() == b.to_bits() || (a.is_nan() && b.is_nan()),
                    "{len}: {a} {b}"
                );
                let c = weighted_median_total_cmp(&v, &w);
                assert!(
                    a.to_bits() == c.to_bits() || (a.is_nan() && c.is_nan()),
                    "{len}: {a} {c}"
                );
            }
        }
        assert!(median(&[f64::NAN]).is_nan());
        assert!(weighted_median(&[1.0], &[0.0]).is_nan());
    }

    #[test]
    fn weighted_median_follows_weights() {
        assert_eq!(weighted_median(&[1.0, 2.0, 3.0], &[1.0, 1.0, 5.0]), 3.0);
        assert_eq!(weighted_median(&[1.0, 2.0, 3.0], &[1.0, 1.0, 1.0]), 2.0);
    }
}
