//! Before/after comparison of two recordings: every summary figure side by
//! side with its change, and for figures with per-element values a
//! Mann–Whitney U test of the two distributions, so that a change within the
//! noise is not called an improvement.
//!
//! The test (Mann & Whitney 1947) uses the normal approximation with the tie
//! correction and a continuity correction of 1/2, two-sided; it gives the
//! same U and p-value as `scipy.stats.mannwhitneyu(x, y,
//! method="asymptotic")` (checked against golden values in
//! `fixtures/mannwhitney_golden.json`). A difference is `significant` when
//! p < [`ALPHA`]. It treats the elements of a recording as independent
//! draws, which they nearly are for edges and chirp measured one by one.

use serde::ser::{SerializeMap, Serializer};
use serde::Serialize;

use crate::analysis::report::{Kind, Report};
use crate::judge::metrics::{ElementField, Metric, DURATIONS, METRICS};
use crate::judge::{self, inside_distance, Profile, Status};

/// Significance level of the two-sided test.
pub const ALPHA: f64 = 0.01;
/// Fewest values on each side for the test to be run.
pub const MIN_SAMPLES: usize = 5;

/// Result of a Mann–Whitney U test.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct MannWhitney {
    /// U statistic of the first sample (rank sum minus n1(n1+1)/2).
    pub u: f64,
    /// Standardized statistic with continuity correction, from max(U1, U2).
    pub z: f64,
    /// Two-sided p-value (normal approximation), in [0, 1].
    pub p_value: f64,
}

/// Two-sided Mann–Whitney U test of `x` against `y`; None if either is empty.
/// Non-finite values are ignored.
pub fn mann_whitney(x: &[f64], y: &[f64]) -> Option<MannWhitney> {
    let x: Vec<f64> = x.iter().copied().filter(|v| v.is_finite()).collect();
    let y: Vec<f64> = y.iter().copied().filter(|v| v.is_finite()).collect();
    let (n1, n2) = (x.len(), y.len());
    if n1 == 0 || n2 == 0 {
        return None;
    }
    let mut all: Vec<(f64, bool)> = x
        .iter()
        .map(|&v| (v, true))
        .chain(y.iter().map(|&v| (v, false)))
        .collect();
    all.sort_by(|a, b| a.0.total_cmp(&b.0));
    let n = all.len();
    let (mut r1, mut tie_term) = (0.0, 0.0);
    let mut i = 0;
    while i < n {
        let mut j = i + 1;
        while j < n && all[j].0 == all[i].0 {
            j += 1;
        }
        // Ranks i+1 ..= j share their mean.
        let rank = (i + 1 + j) as f64 / 2.0;
        let t = (j - i) as f64;
        tie_term += t * t * t - t;
        r1 += rank * all[i..j].iter().filter(|e| e.1).count() as f64;
        i = j;
    }
    let (n1f, n2f, nf) = (n1 as f64, n2 as f64, n as f64);
    let u1 = r1 - n1f * (n1f + 1.0) / 2.0;
    let u = u1.max(n1f * n2f - u1);
    let mu = n1f * n2f / 2.0;
    let var = n1f * n2f / 12.0 * ((nf + 1.0) - tie_term / (nf * (nf - 1.0)));
    let num = u - mu - 0.5;
    let (z, p) = if var > 0.0 {
        let z = num / var.sqrt();
        (z, (2.0 * normal_sf(z)).clamp(0.0, 1.0))
    } else {
        // Every value is the same: nothing tells the samples apart.
        (f64::NEG_INFINITY, 1.0)
    };
    Some(MannWhitney {
        u: u1,
        z,
        p_value: p,
    })
}

/// Upper tail of the standard normal distribution, P(Z > z).
pub fn normal_sf(z: f64) -> f64 {
    0.5 * erfc(z / std::f64::consts::SQRT_2)
}

/// Complementary error function, relative error about 1e-13: the
/// all-positive series erf(x) = 2/√π·e^(−x²)·Σ 2ⁿx^(2n+1)/(1·3·…·(2n+1))
/// below x = 2, the continued fraction
/// erfc(x) = e^(−x²)/√π · 1/(x + (1/2)/(x + 1/(x + (3/2)/(x + …)))) above
/// (Abramowitz & Stegun 7.1.6 and 7.1.14), evaluated by the modified Lentz
/// method.
pub fn erfc(x: f64) -> f64 {
    if x.is_nan() {
        return f64::NAN;
    }
    if x < 0.0 {
        return 2.0 - erfc(-x);
    }
    let two_over_sqrt_pi = std::f64::consts::FRAC_2_SQRT_PI;
    if x < 2.0 {
        let mut term = x;
        let mut sum = x;
        let mut k = 0.0;
        loop {
            k += 1.0;
            term *= 2.0 * x * x / (2.0 * k + 1.0);
            sum += term;
            if term <= sum * 1e-17 {
                break;
            }
        }
        return 1.0 - two_over_sqrt_pi * (-x * x).exp() * sum;
    }
    if x > 27.0 {
        return 0.0;
    }
    // f = x + a1/(x + a2/(x + ...)), a_k = k/2.
    let tiny = 1e-300;
    let mut f = x;
    let mut c = x;
    let mut d = 0.0;
    for k in 1..500 {
        let a = k as f64 / 2.0;
        d = x + a * d;
        d = if d.abs() < tiny { tiny } else { d };
        c = x + a / c;
        c = if c.abs() < tiny { tiny } else { c };
        d = 1.0 / d;
        let delta = c * d;
        f *= delta;
        if (delta - 1.0).abs() < 1e-16 {
            break;
        }
    }
    two_over_sqrt_pi / 2.0 * (-x * x).exp() / f
}

/// What happened to a figure between the recordings.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Change {
    /// Significant (or its verdict changed) and further inside the limits.
    Better,
    /// Significant (or its verdict changed) and closer to or beyond the limits.
    Worse,
    /// Tested and not significant, or exactly equal.
    Unchanged,
    /// Significant, but the figure has no limit that says which way is better.
    Different,
    /// Changed, with no per-element test and no change of verdict.
    Untested,
    /// Missing in one of the recordings.
    NotMeasured,
}

impl Change {
    pub fn as_str(&self) -> &'static str {
        match self {
            Change::Better => "better",
            Change::Worse => "worse",
            Change::Unchanged => "unchanged",
            Change::Different => "different",
            Change::Untested => "untested",
            Change::NotMeasured => "not measured",
        }
    }
}

/// One figure before and after.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Delta {
    #[serde(skip)]
    pub metric: String,
    pub unit: String,
    /// Member compared for object figures (the median for statistics).
    pub stat: Option<String>,
    pub before: Option<f64>,
    pub after: Option<f64>,
    /// after − before.
    pub delta: Option<f64>,
    /// p < ALPHA in the per-element test; null when the figure has no
    /// per-element values or too few (fewer than MIN_SAMPLES on a side).
    pub significant: Option<bool>,
    pub p_value: Option<f64>,
    /// The per-element values that were tested.
    pub tested: Option<String>,
    pub change: Change,
    #[serde(skip)]
    pub decimals: usize,
}

/// Before and after, judged, with the change of every figure.
#[derive(Clone, Debug, Serialize)]
pub struct Comparison {
    pub tool: String,
    pub version: String,
    pub alpha: f64,
    pub before: Report,
    pub after: Report,
    #[serde(serialize_with = "ordered_map")]
    pub deltas: Vec<Delta>,
    /// Receive muting across the two recordings (`compare --muting`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub muting: Option<MutingAcross>,
}

/// Muting depth from a recording with muting off (before) and one with it
/// on (after): the same tone's key-down level difference.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct MutingAcross {
    pub tone_hz: f64,
    pub muting_off_dbfs: f64,
    pub muting_on_dbfs: f64,
    /// Off less on, dB.
    pub depth_db: f64,
}

/// The muting depth across two recordings of the same tone, if both have it.
pub fn muting_across(off: &Report, on: &Report) -> Option<MutingAcross> {
    let (a, b) = (off.summary.level_dbfs?, on.summary.level_dbfs?);
    Some(MutingAcross {
        tone_hz: off.summary.tone_hz?,
        muting_off_dbfs: a,
        muting_on_dbfs: b,
        depth_db: a - b,
    })
}

fn ordered_map<S: Serializer>(d: &[Delta], s: S) -> std::result::Result<S::Ok, S::Error> {
    let mut m = s.serialize_map(Some(d.len()))?;
    for x in d {
        m.serialize_entry(&x.metric, x)?;
    }
    m.end()
}

impl Comparison {
    /// 1 when the after recording fails a limit, else 0.
    pub fn exit_code(&self) -> i32 {
        judge::exit_code(&self.after.verdicts)
    }

    pub fn delta(&self, metric: &str) -> Option<&Delta> {
        self.deltas.iter().find(|d| d.metric == metric)
    }
}

/// Per-element values of one kind.
pub fn element_values(r: &Report, f: ElementField) -> Vec<f64> {
    let e = r.elements.iter();
    match f {
        ElementField::Rise => e.filter_map(|e| e.rise_ms).collect(),
        ElementField::Fall => e.filter_map(|e| e.fall_ms).collect(),
        ElementField::Chirp => e.map(|e| e.chirp_hz).collect(),
        ElementField::ChirpRaw => e.map(|e| e.chirp_raw_hz).collect(),
        ElementField::Level => e.map(|e| e.level_dbfs).collect(),
        ElementField::DitDuration => e
            .filter(|e| e.kind == Kind::Dit)
            .map(|e| e.duration_s * 1e3)
            .collect(),
        ElementField::DahDuration => e
            .filter(|e| e.kind == Kind::Dah)
            .map(|e| e.duration_s * 1e3)
            .collect(),
    }
}

fn field_name(f: ElementField) -> &'static str {
    match f {
        ElementField::Rise => "elements[].rise_ms",
        ElementField::Fall => "elements[].fall_ms",
        ElementField::Chirp => "elements[].chirp_hz",
        ElementField::ChirpRaw => "elements[].chirp_raw_hz",
        ElementField::Level => "elements[].level_dbfs",
        ElementField::DitDuration => "elements[].duration_s of dits",
        ElementField::DahDuration => "elements[].duration_s of dahs",
    }
}

fn test(before: &Report, after: &Report, f: ElementField) -> Option<MannWhitney> {
    let (x, y) = (element_values(before, f), element_values(after, f));
    if x.len() < MIN_SAMPLES || y.len() < MIN_SAMPLES {
        return None;
    }
    mann_whitney(&x, &y)
}

fn median(mut v: Vec<f64>) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let n = v.len();
    Some(if n % 2 == 1 {
        v[n / 2]
    } else {
        (v[n / 2 - 1] + v[n / 2]) / 2.0
    })
}

/// Judges both reports with `profile` (their `verdicts` are replaced) and
/// compares every figure.
pub fn compare(mut before: Report, mut after: Report, profile: &Profile) -> Comparison {
    before.verdicts = judge::judge(&before.summary, profile);
    after.verdicts = judge::judge(&after.summary, profile);
    let jb = serde_json::to_value(&before.summary).expect("plain data");
    let ja = serde_json::to_value(&after.summary).expect("plain data");
    let mut deltas = Vec::new();
    for m in METRICS {
        deltas.push(metric_delta(m, &before, &after, &jb, &ja, profile));
    }
    for &(name, f, _) in DURATIONS {
        let (b, a) = (
            median(element_values(&before, f)),
            median(element_values(&after, f)),
        );
        let t = test(&before, &after, f);
        deltas.push(finish(
            Delta {
                metric: name.to_string(),
                unit: "ms".into(),
                stat: None,
                before: b,
                after: a,
                delta: None,
                significant: None,
                p_value: None,
                tested: None,
                change: Change::NotMeasured,
                decimals: 1,
            },
            t,
            Some(f),
            None,
            None,
        ));
    }
    Comparison {
        tool: "cwaudit".into(),
        version: env!("CARGO_PKG_VERSION").into(),
        alpha: ALPHA,
        before,
        after,
        deltas,
        muting: None,
    }
}

fn metric_delta(
    m: &Metric,
    before: &Report,
    after: &Report,
    jb: &serde_json::Value,
    ja: &serde_json::Value,
    profile: &Profile,
) -> Delta {
    let rule = profile.rule(m.name);
    let stat = rule
        .and_then(|r| r.limit.stat.clone())
        .or(m.default_member().map(str::to_string));
    let d = Delta {
        metric: m.name.to_string(),
        unit: m.unit_of(stat.as_deref()).to_string(),
        before: m.read(jb, stat.as_deref()),
        after: m.read(ja, stat.as_deref()),
        stat,
        delta: None,
        significant: None,
        p_value: None,
        tested: None,
        change: Change::NotMeasured,
        decimals: m.decimals,
    };
    let t = m.element_field.and_then(|f| test(before, after, f));
    let status = |r: &Report| {
        r.verdicts
            .iter()
            .find(|v| v.metric == m.name)
            .map(|v| v.status)
    };
    let statuses = status(before).zip(status(after));
    finish(d, t, m.element_field, rule.map(|r| &r.limit), statuses)
}

fn finish(
    mut d: Delta,
    t: Option<MannWhitney>,
    field: Option<ElementField>,
    limit: Option<&judge::Limit>,
    statuses: Option<(Status, Status)>,
) -> Delta {
    let (Some(b), Some(a)) = (d.before, d.after) else {
        return d;
    };
    d.delta = Some(a - b);
    if let Some(t) = t {
        d.significant = Some(t.p_value < ALPHA);
        d.p_value = Some(t.p_value);
        d.tested = field.map(|f| field_name(f).to_string());
    }
    let direction = || {
        let (gb, ga) = (
            limit.and_then(|l| inside_distance(Some(b), l)),
            limit.and_then(|l| inside_distance(Some(a), l)),
        );
        match (gb, ga) {
            (Some(gb), Some(ga)) if ga > gb => Change::Better,
            (Some(gb), Some(ga)) if ga < gb => Change::Worse,
            _ => Change::Different,
        }
    };
    d.change = match d.significant {
        Some(false) => Change::Unchanged,
        Some(true) => direction(),
        None => match statuses {
            Some((sb, sa)) if sb != sa => {
                if sa < sb {
                    Change::Better
                } else {
                    Change::Worse
                }
            }
            _ if a == b => Change::Unchanged,
            _ => Change::Untested,
        },
    };
    d
}
