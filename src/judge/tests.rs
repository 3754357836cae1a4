//! Verdicts at and around the limits, and profile parsing.

use super::*;
use crate::analysis::report::Summary;
use crate::dsp::stats::Spread;

fn lim(min: Option<f64>, warn_min: Option<f64>, warn_max: Option<f64>, max: Option<f64>) -> Limit {
    Limit {
        min,
        max,
        warn_min,
        warn_max,
        stat: None,
        source: "test".into(),
    }
}

fn spread(median: f64) -> Spread {
    Spread {
        median,
        p10: median - 1.0,
        p90: median + 1.0,
        min: median - 2.0,
        max: median + 2.0,
    }
}

// The built-in rise limit: fail below 2.0 or above 12.0 ms, warn below 3.0 ms
// (common practice, see profile.rs).
fn rise() -> Limit {
    lim(Some(2.0), Some(3.0), None, Some(12.0))
}

#[test]
fn exactly_at_a_failing_limit_passes_with_zero_margin() {
    // Limits are inclusive: 2.0 is below the warning level 3.0, so it warns, not fails.
    assert_eq!(assess(Some(2.0), &rise()), (Status::Warn, Some(0.0)));
    assert_eq!(assess(Some(12.0), &rise()), (Status::Pass, Some(0.0)));
    let chirp = lim(None, None, Some(10.0), Some(20.0));
    assert_eq!(assess(Some(20.0), &chirp), (Status::Warn, Some(0.0)));
}

#[test]
fn just_beyond_a_failing_limit_fails_with_negative_margin() {
    let (s, m) = assess(Some(1.999), &rise());
    assert_eq!(s, Status::Fail);
    assert!((m.unwrap() + 0.001).abs() < 1e-12, "margin {m:?}");
    let (s, m) = assess(Some(12.001), &rise());
    assert_eq!(s, Status::Fail);
    assert!((m.unwrap() + 0.001).abs() < 1e-12, "margin {m:?}");
    let chirp = lim(None, None, Some(10.0), Some(20.0));
    assert_eq!(assess(Some(20.000001), &chirp).0, Status::Fail);
}

#[test]
fn just_inside_a_failing_limit_and_the_warn_band() {
    // Just inside the fail limit but in the warn band.
    let (s, m) = assess(Some(2.001), &rise());
    assert_eq!(s, Status::Warn);
    assert!((m.unwrap() - 0.001).abs() < 1e-12);
    // Exactly at the warning level: inside, so pass; margin to the failing limit 2.0 is 1.0.
    assert_eq!(assess(Some(3.0), &rise()), (Status::Pass, Some(1.0)));
    assert_eq!(assess(Some(2.999), &rise()).0, Status::Warn);
    assert_eq!(assess(Some(3.001), &rise()).0, Status::Pass);
    // Upper warn band.
    let chirp = lim(None, None, Some(10.0), Some(20.0));
    assert_eq!(assess(Some(10.0), &chirp), (Status::Pass, Some(10.0)));
    assert_eq!(assess(Some(10.001), &chirp).0, Status::Warn);
    assert_eq!(assess(Some(9.999), &chirp).0, Status::Pass);
    assert_eq!(assess(Some(19.999), &chirp).0, Status::Warn);
}

#[test]
fn margin_is_the_distance_to_the_nearer_failing_limit() {
    // 5 ms: 3 ms above 2, 7 ms below 12.
    assert_eq!(assess(Some(5.0), &rise()).1, Some(3.0));
    // 10 ms: 8 above 2, 2 below 12.
    assert_eq!(assess(Some(10.0), &rise()).1, Some(2.0));
    // Only warning limits: no failing limit, no margin; still warns.
    let muting = lim(None, Some(30.0), None, None);
    assert_eq!(assess(Some(29.0), &muting), (Status::Warn, None));
    assert_eq!(assess(Some(30.0), &muting), (Status::Pass, None));
    // inside_distance falls back to the warning limits.
    assert_eq!(inside_distance(Some(29.0), &muting), Some(-1.0));
}

#[test]
fn missing_or_non_finite_values_are_not_measured() {
    assert_eq!(assess(None, &rise()), (Status::NotMeasured, None));
    assert_eq!(assess(Some(f64::NAN), &rise()), (Status::NotMeasured, None));
}

#[test]
fn judge_reads_summary_fields_by_name_and_stat() {
    let s = Summary {
        keyed_signal_found: true,
        rise_ms: Some(spread(5.0)),
        fall_ms: Some(spread(1.5)),
        chirp_mean_element_hz: Some(12.0),
        ..Default::default()
    };
    let v = judge(&s, &Profile::defaults());
    let get = |m: &str| v.iter().find(|x| x.metric == m).unwrap();
    assert_eq!(get("rise_ms").value, Some(5.0));
    assert_eq!(get("rise_ms").status, Status::Pass);
    assert_eq!(get("fall_ms").status, Status::Fail);
    assert_eq!(get("fall_ms").margin, Some(-0.5));
    assert_eq!(get("chirp_mean_element_hz").status, Status::Warn);
    // Figures this summary lacks (or that are null) are "not measured".
    assert_eq!(get("backwave_db").status, Status::NotMeasured);
    assert_eq!(get("hum").status, Status::NotMeasured);
    assert_eq!(overall(&v), Status::Fail);
    assert_eq!(exit_code(&v), 1);

    // stat = "p90" judges the p90 (median + 1 here).
    let p = Profile::parse("[limits.rise_ms]\nstat = \"p90\"\nmax = 5.5\n", "t").unwrap();
    let v = judge(&s, &p);
    let r = v.iter().find(|x| x.metric == "rise_ms").unwrap();
    assert_eq!((r.value, r.status), (Some(6.0), Status::Fail));
    assert_eq!(r.margin, Some(-0.5));
}

#[test]
fn overall_ignores_unmeasured_and_takes_the_worst() {
    let s = Summary {
        keyed_signal_found: true,
        rise_ms: Some(spread(2.5)),
        fall_ms: Some(spread(5.0)),
        ..Default::default()
    };
    let v = judge(&s, &Profile::defaults());
    assert_eq!(overall(&v), Status::Warn);
    assert_eq!(exit_code(&v), 0);
}

#[test]
fn profile_overrides_metric_by_metric() {
    let p = Profile::parse("[limits.chirp_mean_element_hz]\nmax = 5\n", "mine").unwrap();
    let d = Profile::defaults();
    let c = p.rule("chirp_mean_element_hz").unwrap();
    assert_eq!((c.limit.max, c.limit.warn_max), (Some(5.0), None));
    assert_eq!(c.limit.source, "mine");
    // Other metrics keep their defaults.
    assert_eq!(p.rule("rise_ms"), d.rule("rise_ms"));
    // An empty table turns a limit off; use_defaults = false starts from nothing.
    let p = Profile::parse("[limits.rise_ms]\n", "t").unwrap();
    assert!(p.rule("rise_ms").is_none() && p.rule("fall_ms").is_some());
    let p = Profile::parse("use_defaults = false\n[limits.wpm]\nmin = 10.0\n", "t").unwrap();
    assert_eq!(p.rules.len(), 1);
}

#[test]
fn profile_errors_name_the_line_and_the_valid_metrics() {
    let (line, msg) = Profile::parse(
        "# c\n\n[limits.rise_ms]\nmax = 9\n\n[limits.rise_time]\nmax = 3\n",
        "t",
    )
    .unwrap_err();
    assert_eq!(line, 6, "{msg}");
    assert!(msg.contains("unknown metric \"rise_time\""), "{msg}");
    assert!(msg.contains("rise_ms, fall_ms"), "{msg}");
    // Malformed TOML: the line of the bad token.
    let (line, msg) = Profile::parse("[limits.rise_ms]\nmin = 2.0\nmax = = 3\n", "t").unwrap_err();
    assert_eq!(line, 3, "{msg}");
    assert!(msg.contains("chirp_mean_element_hz"), "{msg}");
    // Unknown key inside a table.
    let (line, msg) =
        Profile::parse("[limits.rise_ms]\nmin = 2.0\nmaximum = 3\n", "t").unwrap_err();
    assert_eq!(line, 3, "{msg}");
    assert!(msg.contains("maximum"), "{msg}");
    // A string where a number belongs.
    let (line, _) = Profile::parse("\n[limits.fall_ms]\nmax = \"ten\"\n", "t").unwrap_err();
    assert_eq!(line, 3);
    // stat on a single number, unknown stat, limits out of order.
    let (line, msg) = Profile::parse("[limits.wpm]\nstat = \"p90\"\n", "t").unwrap_err();
    assert_eq!(line, 1);
    assert!(msg.contains("single number"), "{msg}");
    let (_, msg) = Profile::parse("[limits.rise_ms]\nstat = \"p95\"\n", "t").unwrap_err();
    assert!(msg.contains("median, p10, p90, min, max"), "{msg}");
    let (_, msg) =
        Profile::parse("[limits.rise_ms]\nmin = 5.0\nwarn_min = 4.0\n", "t").unwrap_err();
    assert!(msg.contains("order"), "{msg}");
    // Unknown top-level key.
    let (line, msg) = Profile::parse("\n\nlimit = 3\n", "t").unwrap_err();
    assert_eq!(line, 3, "{msg}");
}

#[test]
fn printed_defaults_parse_back_to_the_same_profile() {
    let d = Profile::defaults();
    let back = Profile::parse(&d.to_toml(), "printed").unwrap();
    assert_eq!(back, d);
    // Every default names its source.
    assert!(d.rules.iter().all(|r| !r.limit.source.is_empty()));
    // Every metric name in the table is listed in the printed profile.
    let t = d.to_toml();
    assert!(metrics::METRICS
        .iter()
        .all(|m| t.contains(&format!("#   {}", m.name))));
}

#[test]
fn metric_names_are_unique_and_spread_members_match_the_stats_struct() {
    let mut names: Vec<&str> = metrics::METRICS.iter().map(|m| m.name).collect();
    names.sort();
    names.dedup();
    assert_eq!(names.len(), metrics::METRICS.len());
    let j = serde_json::to_value(spread(1.0)).unwrap();
    for m in metrics::SPREAD {
        assert!(j.get(m.key).is_some(), "Spread has no {}", m.key);
    }
    // Every statistics field of today's Summary resolves through the table.
    let s = Summary {
        rise_ms: Some(spread(1.0)),
        fall_ms: Some(spread(2.0)),
        chirp_hz: Some(spread(3.0)),
        chirp_raw_hz: Some(spread(4.0)),
        ..Default::default()
    };
    let j = serde_json::to_value(&s).unwrap();
    for (n, want) in [
        ("rise_ms", 1.0),
        ("fall_ms", 2.0),
        ("chirp_hz", 3.0),
        ("chirp_raw_hz", 4.0),
    ] {
        assert_eq!(metrics::find(n).unwrap().read(&j, None), Some(want));
    }
}

#[test]
fn a_figure_below_its_floor_passes_only_when_the_floor_does() {
    // The built-in backwave limit fails above -40 dB and warns above -50 dB
    // (common practice). A backwave below a -57.5 dB floor is at most -57.5:
    // a pass, with the margin to -40. A floor of -35 dB says nothing: not
    // measured.
    let p = Profile::defaults();
    let at = |floor: f64| {
        let mut s = Summary::default();
        s.carrier.backwave_floor_db = Some(floor);
        judge(&s, &p)
            .into_iter()
            .find(|v| v.metric == "backwave_db")
            .unwrap()
    };
    let v = at(-57.5);
    assert_eq!(
        (v.status, v.below, v.value),
        (Status::Pass, Some(-57.5), None)
    );
    assert!((v.margin.unwrap() - 17.5).abs() < 1e-9);
    assert_eq!(at(-45.0).status, Status::NotMeasured);
    assert_eq!(at(-35.0).status, Status::NotMeasured);
}
