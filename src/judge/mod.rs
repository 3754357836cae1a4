//! Judgement: compares a report's summary figures with limits and gives
//! verdicts. It reads the report like a presentation does and measures
//! nothing; presentations print these verdicts and decide nothing.

pub mod metrics;
pub mod profile;

use serde::{Deserialize, Serialize};

use crate::analysis::report::Summary;
pub use profile::{Limit, Profile, Rule};

/// Outcome for one figure, or for a whole recording.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
pub enum Status {
    #[serde(rename = "not measured")]
    NotMeasured,
    #[serde(rename = "pass")]
    Pass,
    #[serde(rename = "warn")]
    Warn,
    #[serde(rename = "fail")]
    Fail,
}

impl Status {
    pub fn as_str(&self) -> &'static str {
        match self {
            Status::NotMeasured => "not measured",
            Status::Pass => "pass",
            Status::Warn => "warn",
            Status::Fail => "fail",
        }
    }
}

/// Which limit a value is beyond.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Crossed {
    BelowMin,
    AboveMax,
    BelowWarnMin,
    AboveWarnMax,
}

/// The verdict on one figure.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Verdict {
    /// The summary field judged.
    pub metric: String,
    /// Member judged for object figures (`median`, `p90`, `am_percent`, ...).
    pub stat: Option<String>,
    /// The value judged; null when the recording does not give it.
    pub value: Option<f64>,
    pub unit: String,
    /// Failing limits.
    pub min: Option<f64>,
    pub max: Option<f64>,
    /// Warning limits.
    pub warn_min: Option<f64>,
    pub warn_max: Option<f64>,
    pub status: Status,
    /// Distance to the nearest failing limit in the figure's unit, positive
    /// inside the limits; null without a value or without failing limits.
    pub margin: Option<f64>,
    /// Where the limit comes from.
    pub source: String,
    /// When the figure is below what the recording resolves (null value):
    /// that floor. The true value is at most this, so a floor inside every
    /// upper limit passes.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub below: Option<f64>,
}

impl Verdict {
    /// The limit the value is beyond, failing limits first.
    pub fn crossed(&self) -> Option<(Crossed, f64)> {
        let v = self.value?;
        let below = |l: Option<f64>| l.filter(|&l| v < l);
        let above = |l: Option<f64>| l.filter(|&l| v > l);
        below(self.min)
            .map(|l| (Crossed::BelowMin, l))
            .or(above(self.max).map(|l| (Crossed::AboveMax, l)))
            .or(below(self.warn_min).map(|l| (Crossed::BelowWarnMin, l)))
            .or(above(self.warn_max).map(|l| (Crossed::AboveWarnMax, l)))
    }
}

/// Status and margin of a value under a limit. Limits are inclusive: a value
/// exactly at `max` passes with margin 0.
pub fn assess(value: Option<f64>, l: &Limit) -> (Status, Option<f64>) {
    let Some(v) = value.filter(|v| v.is_finite()) else {
        return (Status::NotMeasured, None);
    };
    let margin = [l.min.map(|m| v - m), l.max.map(|m| m - v)]
        .into_iter()
        .flatten()
        .reduce(f64::min);
    let status = if l.min.is_some_and(|m| v < m) || l.max.is_some_and(|m| v > m) {
        Status::Fail
    } else if l.warn_min.is_some_and(|m| v < m) || l.warn_max.is_some_and(|m| v > m) {
        Status::Warn
    } else {
        Status::Pass
    };
    (status, margin)
}

/// How far a value lies inside its limits, in the figure's unit (negative
/// outside): the distance to the nearest failing limit, or to the nearest
/// warning limit when the figure has no failing one. `compare` calls a
/// change "better" when this grows. None without a value or limits.
pub fn inside_distance(value: Option<f64>, l: &Limit) -> Option<f64> {
    let v = value.filter(|v| v.is_finite())?;
    let d = |lo: Option<f64>, hi: Option<f64>| {
        [lo.map(|m| v - m), hi.map(|m| m - v)]
            .into_iter()
            .flatten()
            .reduce(f64::min)
    };
    d(l.min, l.max).or_else(|| d(l.warn_min, l.warn_max))
}

/// Verdicts on every figure the profile limits, in report order.
pub fn judge(summary: &Summary, profile: &Profile) -> Vec<Verdict> {
    let json = serde_json::to_value(summary).expect("the summary holds only plain data");
    profile
        .rules
        .iter()
        .map(|r| {
            let m = r.metric;
            let stat = r
                .limit
                .stat
                .clone()
                .or(m.default_member().map(str::to_string));
            let value = m.read(&json, stat.as_deref());
            let (mut status, mut margin) = assess(value, &r.limit);
            let below = floor_of(&json, m.name, stat.as_deref()).filter(|_| value.is_none());
            if let Some(f) = below {
                // At most f: judged by the upper limits only, and only a pass
                // can be concluded (a floor above a limit says nothing).
                let upper = Limit {
                    min: None,
                    warn_min: None,
                    ..r.limit.clone()
                };
                let (st, mg) = assess(Some(f), &upper);
                if st == Status::Pass && (upper.max.is_some() || upper.warn_max.is_some()) {
                    status = Status::Pass;
                    margin = mg;
                }
            }
            Verdict {
                metric: m.name.to_string(),
                unit: m.unit_of(stat.as_deref()).to_string(),
                stat,
                value,
                min: r.limit.min,
                max: r.limit.max,
                warn_min: r.limit.warn_min,
                warn_max: r.limit.warn_max,
                status,
                margin,
                source: r.limit.source.clone(),
                below,
            }
        })
        .collect()
}

/// The resolution floor of a figure that is null because it is below it:
/// `backwave_floor_db` for `backwave_db`, the hum's AM and FM floors.
fn floor_of(json: &serde_json::Value, metric: &str, stat: Option<&str>) -> Option<f64> {
    match (metric, stat) {
        ("backwave_db", _) => json.get("backwave_floor_db")?.as_f64(),
        ("hum", Some("am_percent")) => json.get("hum")?.get("am_floor_percent")?.as_f64(),
        ("hum", Some("fm_hz")) => json.get("hum")?.get("fm_floor_hz")?.as_f64(),
        _ => None,
    }
}

/// The result of a whole recording: fail if any figure fails, warn if any
/// warns, else pass (figures not measured do not count).
pub fn overall(verdicts: &[Verdict]) -> Status {
    verdicts
        .iter()
        .map(|v| v.status)
        .filter(|s| *s != Status::NotMeasured)
        .max()
        .unwrap_or(Status::Pass)
}

/// Exit code of a judged recording: 1 when any limit fails, else 0.
pub fn exit_code(verdicts: &[Verdict]) -> i32 {
    i32::from(overall(verdicts) == Status::Fail)
}

#[cfg(test)]
mod tests;
