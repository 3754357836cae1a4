//! Order statistics for per-element figures.

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

/// Median of unsorted data (NaN-free); NaN when empty.
pub fn median(v: &[f64]) -> f64 {
    let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
    s.sort_by(|a, b| a.total_cmp(b));
    quantile_sorted(&s, 0.5)
}

/// Weighted median: the value where the cumulative weight reaches half.
pub fn weighted_median(values: &[f64], weights: &[f64]) -> f64 {
    let mut p: Vec<(f64, f64)> = values
        .iter()
        .zip(weights)
        .filter(|(v, w)| v.is_finite() && **w > 0.0)
        .map(|(v, w)| (*v, *w))
        .collect();
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
    #[test]
    fn weighted_median_follows_weights() {
        assert_eq!(weighted_median(&[1.0, 2.0, 3.0], &[1.0, 1.0, 5.0]), 3.0);
        assert_eq!(weighted_median(&[1.0, 2.0, 3.0], &[1.0, 1.0, 1.0]), 2.0);
    }
}
