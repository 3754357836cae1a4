//! Dit/dah classification and speed by PARIS timing (ITU-R M.1677-1: dah =
//! 3 dits, element space 1, letter space 3, word space 7; "PARIS " = 50
//! units, so one unit = 1.2 / WPM s).

use crate::dsp::stats::median;

use super::report::Kind;

/// Keying figures from element durations and the gaps between them.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Timing {
    pub kinds: Vec<Kind>,
    pub unit_s: Option<f64>,
    pub wpm: Option<f64>,
    pub dah_dit_ratio: Option<f64>,
    pub mark_space_ratio: Option<f64>,
}

/// Two clusters in log-duration (k-means, k = 2); None when all durations
/// are alike (ratio below 1.6), which means a single kind.
fn split_threshold(d: &[f64]) -> Option<f64> {
    let lmin = d.iter().copied().fold(f64::INFINITY, f64::min).ln();
    let lmax = d.iter().copied().fold(f64::NEG_INFINITY, f64::max).ln();
    if lmax - lmin <= 1.6f64.ln() || lmax.is_nan() || lmin.is_nan() {
        return None;
    }
    let (mut a, mut b) = (lmin, lmax);
    for _ in 0..50 {
        let t = 0.5 * (a + b);
        let (lo, hi): (Vec<f64>, Vec<f64>) = d.iter().map(|x| x.ln()).partition(|&x| x < t);
        if lo.is_empty() || hi.is_empty() {
            break;
        }
        let na = lo.iter().sum::<f64>() / lo.len() as f64;
        let nb = hi.iter().sum::<f64>() / hi.len() as f64;
        if (na - a).abs() < 1e-12 && (nb - b).abs() < 1e-12 {
            break;
        }
        a = na;
        b = nb;
    }
    Some((0.5 * (a + b)).exp())
}

/// Classifies marks and derives speed and weighting. `gaps[i]` is the key-up
/// time after mark i (None after the last mark or across a cut).
pub fn analyse(durations: &[f64], gaps: &[Option<f64>]) -> Timing {
    if durations.is_empty() {
        return Timing::default();
    }
    let thr = split_threshold(durations);
    let kinds: Vec<Kind> = match thr {
        Some(t) => durations
            .iter()
            .map(|&d| if d < t { Kind::Dit } else { Kind::Dah })
            .collect(),
        None => {
            // One kind only: dahs if the marks are about three times the
            // shortest gaps, else dits.
            let m = median(durations);
            let g: Vec<f64> = gaps.iter().flatten().copied().collect();
            let gmin = g.iter().copied().fold(f64::INFINITY, f64::min);
            let kind = if g.len() >= 2 && m > 2.0 * gmin {
                Kind::Dah
            } else {
                Kind::Dit
            };
            vec![kind; durations.len()]
        }
    };
    let pick = |k: Kind| -> Vec<f64> {
        durations
            .iter()
            .zip(&kinds)
            .filter(|(_, kk)| **kk == k)
            .map(|(d, _)| *d)
            .collect()
    };
    let dits = pick(Kind::Dit);
    let dahs = pick(Kind::Dah);
    let dit = (!dits.is_empty()).then(|| median(&dits));
    let dah = (!dahs.is_empty()).then(|| median(&dahs));
    // First guess of the unit from the marks alone.
    let u0 = match (dit, dah) {
        (Some(a), Some(b)) => (a + b) / 4.0,
        (Some(a), None) => a,
        (None, Some(b)) => b / 3.0,
        _ => return Timing::default(),
    };
    // Element spaces: gaps under two units (letter spaces are three).
    let spaces: Vec<f64> = gaps
        .iter()
        .flatten()
        .copied()
        .filter(|&g| g < 2.0 * u0)
        .collect();
    let space = (!spaces.is_empty()).then(|| median(&spaces));
    let unit = match (dit, space) {
        (Some(d), Some(s)) => (d + s) / 2.0,
        (None, Some(s)) => s,
        _ => u0,
    };
    Timing {
        kinds,
        unit_s: Some(unit),
        wpm: Some(1.2 / unit),
        dah_dit_ratio: match (dit, dah) {
            (Some(a), Some(b)) => Some(b / a),
            _ => None,
        },
        mark_space_ratio: match (dit, space) {
            (Some(a), Some(s)) => Some(a / s),
            _ => None,
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn paris_at_20_wpm() {
        // "PARIS" at 20 WPM: unit = 1.2/20 = 60 ms (ITU-R M.1677-1).
        // P .--.  A .-  R .-.  I ..  S ...
        let u = 0.06;
        let letters = [".--.", ".-", ".-.", "..", "..."];
        let mut d = Vec::new();
        let mut g = Vec::new();
        for (li, l) in letters.iter().enumerate() {
            for (ei, c) in l.chars().enumerate() {
                d.push(if c == '.' { u } else { 3.0 * u });
                let last_el = ei + 1 == l.len();
                g.push(Some(if !last_el {
                    u
                } else if li + 1 < letters.len() {
                    3.0 * u
                } else {
                    7.0 * u
                }));
            }
        }
        let t = analyse(&d, &g);
        assert!((t.wpm.unwrap() - 20.0).abs() < 1e-9);
        assert!((t.dah_dit_ratio.unwrap() - 3.0).abs() < 1e-9);
        assert!((t.mark_space_ratio.unwrap() - 1.0).abs() < 1e-9);
        assert_eq!(t.kinds.iter().filter(|k| **k == Kind::Dah).count(), 4);
    }
}
