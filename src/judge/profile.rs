//! Limits: the built-in defaults (each with its source), profiles read from
//! TOML, and the defaults written back out as a commented profile.

use std::collections::BTreeMap;
use std::fmt::Write;
use std::path::Path;

use serde::{Deserialize, Serialize};
use toml::Spanned;

use super::metrics::{self, Metric, Shape};
use crate::error::{CwError, Result};

/// Limits on one figure. A value outside `min`..`max` fails, one outside
/// `warn_min`..`warn_max` (but inside the failing limits) warns. The limits
/// themselves are inside: a value exactly at `max` passes.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Limit {
    pub min: Option<f64>,
    pub max: Option<f64>,
    pub warn_min: Option<f64>,
    pub warn_max: Option<f64>,
    /// Member of an object figure to judge (`median` when not given for statistics).
    pub stat: Option<String>,
    /// Where the numbers come from.
    pub source: String,
}

impl Limit {
    fn is_empty(&self) -> bool {
        self.min.is_none()
            && self.max.is_none()
            && self.warn_min.is_none()
            && self.warn_max.is_none()
    }
}

/// A limit on a named figure.
#[derive(Clone, Debug, PartialEq)]
pub struct Rule {
    pub metric: &'static Metric,
    pub limit: Limit,
}

/// The limits in force: one rule per judged figure, in report order.
#[derive(Clone, Debug, PartialEq)]
pub struct Profile {
    pub rules: Vec<Rule>,
}

const COMMON: &str = "common practice";

/// The built-in limits. Reasoning, figure by figure:
///
/// - `rise_ms`, `fall_ms` (median of the elements): clean keying rises and
///   falls in about 4-6 ms at ordinary speeds, and below about 1 ms key
///   clicks are strong (BRIEF.md, common practice). Edges under 2 ms fail:
///   half the typical value, and close to what a 500 Hz CW filter shows of
///   a hard-keyed signal (1.6-1.9 ms), so a pass cannot come from the
///   receiver filter alone. Under 3 ms warns. Above 12 ms fails: the edges
///   then take 40 % of a dit at 20 WPM (60 ms) and the code goes soft
///   (common practice). A 5 ms raised-cosine edge passes, 0.5 ms fails.
/// - `chirp_mean_element_hz`: a few hertz of chirp is inaudible on a
///   500-1000 Hz note; tens of hertz is heard as a chirpy note (common
///   practice). Warn above 10 Hz, fail above 20 Hz, so 26 Hz at the 50 %
///   point fails. The mean-element figure is used because it resolves
///   chirp too small to see in single elements (README, Accuracy).
/// - `occupied_to_necessary_ratio`: necessary bandwidth for Morse
///   telegraphy is B·K with B = 1/dit baud and K = 5 (Radio Regulations
///   Appendix 1, ITU-R SM.1138). Well-shaped keying occupies about that, so
///   warn above 1.0; failing only above 2.0 is common practice.
/// - `backwave_db`: a carrier leaking 40 dB below key-down is plainly
///   audible to a nearby station; 50 dB down is a reasonable target
///   (common practice).
/// - `hum` (AM depth): 2 % is just audible as roughness, 5 % is a rough
///   note (common practice).
/// - `rx_muting_db`: muting that leaves the sidetone 30-40 dB down is a
///   reasonable target (BRIEF.md, common practice): warn below 30 dB.
fn default_rules() -> Vec<(&'static str, Limit)> {
    let lim = |min, warn_min, warn_max, max, stat: Option<&str>, source: &str| Limit {
        min,
        max,
        warn_min,
        warn_max,
        stat: stat.map(str::to_string),
        source: source.to_string(),
    };
    let edges = "common practice: clean keying 4-6 ms, clicks strong below about 1 ms";
    vec![
        ("rise_ms", lim(Some(2.0), Some(3.0), None, Some(12.0), Some("median"), edges)),
        ("fall_ms", lim(Some(2.0), Some(3.0), None, Some(12.0), Some("median"), edges)),
        (
            "chirp_mean_element_hz",
            lim(None, None, Some(10.0), Some(20.0), None, "common practice: a few Hz is inaudible, tens of Hz is a chirpy note"),
        ),
        (
            "occupied_to_necessary_ratio",
            lim(
                None,
                None,
                Some(1.0),
                Some(2.0),
                None,
                "Radio Regulations App. 1 / ITU-R SM.1138 (B*K, K = 5); fail at 2x is common practice",
            ),
        ),
        ("backwave_db", lim(None, None, Some(-50.0), Some(-40.0), None, COMMON)),
        ("hum", lim(None, None, Some(2.0), Some(5.0), Some("am_percent"), COMMON)),
        (
            "rx_muting_db",
            lim(None, Some(30.0), None, None, None, "common practice: 30-40 dB (BRIEF.md)"),
        ),
    ]
}

impl Profile {
    /// The built-in limits.
    pub fn defaults() -> Profile {
        let mut p = Profile { rules: vec![] };
        for (name, limit) in default_rules() {
            let metric = metrics::find(name).expect("default limits name metrics from the table");
            p.set(metric, limit);
        }
        p
    }

    /// The rule for a figure, if it is judged.
    pub fn rule(&self, name: &str) -> Option<&Rule> {
        self.rules.iter().find(|r| r.metric.name == name)
    }

    fn set(&mut self, metric: &'static Metric, limit: Limit) {
        self.rules.retain(|r| r.metric.name != metric.name);
        if !limit.is_empty() {
            self.rules.push(Rule { metric, limit });
        }
        let order = |r: &Rule| {
            metrics::METRICS
                .iter()
                .position(|m| m.name == r.metric.name)
        };
        self.rules.sort_by_key(order);
    }

    /// Reads a profile file: the defaults (unless `use_defaults = false`)
    /// overridden metric by metric by its `[limits.METRIC]` tables.
    pub fn load(path: &Path) -> Result<Profile> {
        let text = std::fs::read_to_string(path)
            .map_err(|e| CwError::input(path, format!("cannot be read as a profile ({e})")))?;
        Profile::parse(&text, &format!("profile {}", path.display()))
            .map_err(|(line, msg)| CwError::input(path, format!("line {line}: {msg}")))
    }

    /// Parses profile text; an error is (1-based line, message naming the
    /// valid metrics where that helps). `origin` becomes the source of
    /// limits that do not state their own.
    pub fn parse(text: &str, origin: &str) -> std::result::Result<Profile, (usize, String)> {
        let line_of = |offset: usize| text[..offset.min(text.len())].matches('\n').count() + 1;
        let raw: RawProfile = toml::from_str(text).map_err(|e| {
            let line = e.span().map_or(1, |s| line_of(s.start));
            let msg = e.message().trim().trim_end_matches('.').to_string();
            (line, format!("{msg}; the file must hold [limits.METRIC] tables with min, max, warn_min, warn_max, stat or source, METRIC one of: {}", metrics::names()))
        })?;
        let mut p = if raw.use_defaults.unwrap_or(true) {
            Profile::defaults()
        } else {
            Profile { rules: vec![] }
        };
        for (key, body) in raw.limits {
            let line = line_of(key.span().start);
            let name = key.get_ref().as_str();
            let Some(metric) = metrics::find(name) else {
                return Err((
                    line,
                    format!("unknown metric {name:?}; valid names: {}", metrics::names()),
                ));
            };
            let r = body.into_inner();
            let limit = Limit {
                min: r.min,
                max: r.max,
                warn_min: r.warn_min,
                warn_max: r.warn_max,
                stat: r.stat,
                source: r.source.unwrap_or_else(|| origin.to_string()),
            };
            check(metric, &limit).map_err(|m| (line, m))?;
            p.set(metric, limit);
        }
        Ok(p)
    }

    /// The profile as TOML with comments; parsing it gives this profile back.
    pub fn to_toml(&self) -> String {
        let mut o = String::new();
        let _ = writeln!(o, "# cwaudit limits profile.");
        let _ = writeln!(o, "#");
        let _ = writeln!(
            o,
            "# Pass it with --profile FILE. A figure outside min..max fails, one outside"
        );
        let _ = writeln!(
            o,
            "# warn_min..warn_max warns; a value exactly at a limit is inside it. For"
        );
        let _ = writeln!(
            o,
            "# statistics figures (rise_ms, fall_ms, chirp_hz, chirp_raw_hz) `stat` picks"
        );
        let _ = writeln!(
            o,
            "# median, p10, p90, min or max (default median); for hum, sidetone and"
        );
        let _ = writeln!(
            o,
            "# bandwidth_hz it picks the member. An empty table turns a limit off."
        );
        let _ = writeln!(
            o,
            "# A figure the recording does not give is reported as \"not measured\"."
        );
        let _ = writeln!(o, "#");
        let _ = writeln!(o, "# Figures that can be limited:");
        for m in metrics::METRICS {
            let unit = if m.unit.is_empty() {
                String::new()
            } else {
                format!(" [{}]", m.unit)
            };
            let members = if m.members().is_empty() {
                String::new()
            } else {
                format!(
                    " (stat: {})",
                    m.members()
                        .iter()
                        .map(|x| x.key)
                        .collect::<Vec<_>>()
                        .join(", ")
                )
            };
            let _ = writeln!(o, "#   {}{unit}: {}{members}", m.name, m.about);
        }
        let _ = writeln!(o);
        let _ = writeln!(
            o,
            "# This file lists every limit in force; with use_defaults = true, the"
        );
        let _ = writeln!(o, "# built-in limits apply to figures it does not name.");
        let _ = writeln!(o, "use_defaults = false");
        for r in &self.rules {
            let l = &r.limit;
            let _ = writeln!(o);
            let _ = writeln!(o, "# {}, {}", r.metric.name, r.metric.about);
            let _ = writeln!(o, "[limits.{}]", r.metric.name);
            if let Some(s) = &l.stat {
                let _ = writeln!(o, "stat = {}", toml_str(s));
            }
            for (k, v) in [
                ("min", l.min),
                ("warn_min", l.warn_min),
                ("warn_max", l.warn_max),
                ("max", l.max),
            ] {
                if let Some(v) = v {
                    let _ = writeln!(o, "{k} = {}", toml_num(v));
                }
            }
            let _ = writeln!(o, "source = {}", toml_str(&l.source));
        }
        o
    }
}

/// A number TOML reads back exactly (always with a decimal point or exponent).
fn toml_num(v: f64) -> String {
    let s = format!("{v:?}");
    if s.contains(['.', 'e', 'E', 'i', 'n']) {
        s
    } else {
        format!("{s}.0")
    }
}

fn toml_str(s: &str) -> String {
    serde_json::to_string(s).expect("a string serializes")
}

/// Checks one limit against its metric.
fn check(metric: &Metric, l: &Limit) -> std::result::Result<(), String> {
    let name = metric.name;
    match (&metric.shape, &l.stat) {
        (Shape::Scalar, Some(s)) => {
            return Err(format!(
                "{name} is a single number; `stat = {s:?}` does not apply to it"
            ))
        }
        (Shape::Object(ms), Some(s)) if !ms.iter().any(|m| m.key == s) => {
            let keys: Vec<&str> = ms.iter().map(|m| m.key).collect();
            return Err(format!(
                "{name} has no {s:?}; stat must be one of {}",
                keys.join(", ")
            ));
        }
        _ => {}
    }
    let named = [
        ("min", l.min),
        ("warn_min", l.warn_min),
        ("warn_max", l.warn_max),
        ("max", l.max),
    ];
    for (k, v) in named {
        if v.is_some_and(|v| !v.is_finite()) {
            return Err(format!("{name}: {k} must be a finite number"));
        }
    }
    // Present limits must be in the order min <= warn_min <= warn_max <= max.
    let present: Vec<(&str, f64)> = named
        .iter()
        .filter_map(|(k, v)| v.map(|v| (*k, v)))
        .collect();
    for w in present.windows(2) {
        if w[0].1 > w[1].1 {
            return Err(format!(
                "{name}: {} = {} is above {} = {}; the order must be min <= warn_min <= warn_max <= max",
                w[0].0, w[0].1, w[1].0, w[1].1
            ));
        }
    }
    Ok(())
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawProfile {
    use_defaults: Option<bool>,
    #[serde(default)]
    limits: BTreeMap<Spanned<String>, Spanned<RawLimit>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct RawLimit {
    min: Option<f64>,
    max: Option<f64>,
    warn_min: Option<f64>,
    warn_max: Option<f64>,
    stat: Option<String>,
    source: Option<String>,
}
