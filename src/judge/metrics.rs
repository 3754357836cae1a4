//! The one table of summary figures that limits can judge and `compare` can
//! set side by side. A metric's name is the summary's JSON field name; its
//! value is read from the serialized summary, so a figure the analysis does
//! not (yet) fill in, or leaves null, is simply "not measured".

use serde_json::Value;

/// How a figure is stored in the summary JSON.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Shape {
    /// A number (or null).
    Scalar,
    /// An object of members; `stat` picks one, the first is the default.
    /// Statistics objects (`{median, p10, p90, min, max}`) are the common case.
    Object(&'static [Member]),
}

/// One member of an object figure: its key and its unit.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Member {
    pub key: &'static str,
    /// Unit of this member; `None` = the metric's own unit.
    pub unit: Option<&'static str>,
}

const fn m(key: &'static str) -> Member {
    Member { key, unit: None }
}

const fn mu(key: &'static str, unit: &'static str) -> Member {
    Member {
        key,
        unit: Some(unit),
    }
}

/// The statistics object of per-element figures (`dsp::stats::Spread`).
pub const SPREAD: &[Member] = &[m("median"), m("p10"), m("p90"), m("min"), m("max")];
const HUM: &[Member] = &[
    mu("am_percent", "%"),
    mu("fm_hz", "Hz"),
    mu("frequency_hz", "Hz"),
];
const SIDETONE: &[Member] = &[
    mu("ratio_db", "dB"),
    mu("sidetone_dbfs", "dBFS"),
    mu("signal_dbfs", "dBFS"),
    mu("sidetone_hz", "Hz"),
    mu("signal_hz", "Hz"),
];
const XDB: &[Member] = &[m("20"), m("30"), m("40"), m("50"), m("60")];
const CLICKS: &[Member] = &[
    m("rise_sideband_db"),
    m("fall_sideband_db"),
    m("noise_sideband_db"),
];

/// A summary figure.
#[derive(Clone, Copy, Debug)]
pub struct Metric {
    /// The summary's JSON field name, also the name in profiles.
    pub name: &'static str,
    pub shape: Shape,
    /// Unit as shown ("" for ratios and counts).
    pub unit: &'static str,
    /// Decimals shown in the terminal.
    pub decimals: usize,
    /// The per-element field whose distribution `compare` tests for this
    /// figure (rise, fall, chirp, level), if any.
    pub element_field: Option<ElementField>,
    /// What it is, in a few words (for `cwaudit limits` and help).
    pub about: &'static str,
}

/// Per-element figures whose distributions `compare` tests.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ElementField {
    Rise,
    Fall,
    Chirp,
    ChirpRaw,
    Level,
    DitDuration,
    DahDuration,
}

const fn scalar(
    name: &'static str,
    unit: &'static str,
    decimals: usize,
    about: &'static str,
) -> Metric {
    Metric {
        name,
        shape: Shape::Scalar,
        unit,
        decimals,
        element_field: None,
        about,
    }
}

const fn tested(mut x: Metric, f: ElementField) -> Metric {
    x.element_field = Some(f);
    x
}

const fn object(
    name: &'static str,
    members: &'static [Member],
    unit: &'static str,
    decimals: usize,
    about: &'static str,
) -> Metric {
    Metric {
        name,
        shape: Shape::Object(members),
        unit,
        decimals,
        element_field: None,
        about,
    }
}

/// Every summary figure limits may name, in report order. Figures that a
/// later analysis stage adds (bandwidth, backwave, hum, muting, sidetone,
/// drift) are listed already: until they are filled in they read "not
/// measured".
pub const METRICS: &[Metric] = &[
    scalar("tone_hz", "Hz", 2, "pitch of the keyed tone"),
    tested(
        scalar("level_dbfs", "dBFS", 1, "median key-down level"),
        ElementField::Level,
    ),
    scalar("snr_db", "dB", 1, "key-down carrier over noise in 2500 Hz"),
    scalar("wpm", "WPM", 1, "speed by PARIS timing"),
    scalar("unit_ms", "ms", 2, "length of one PARIS unit"),
    scalar("dah_dit_ratio", "", 2, "median dah over median dit"),
    scalar("mark_space_ratio", "", 2, "dit mark over element space"),
    tested(
        object("rise_ms", SPREAD, "ms", 2, "10-90 % rise time per element"),
        ElementField::Rise,
    ),
    tested(
        object("fall_ms", SPREAD, "ms", 2, "90-10 % fall time per element"),
        ElementField::Fall,
    ),
    tested(
        object("chirp_hz", SPREAD, "Hz", 1, "chirp per element (model fit)"),
        ElementField::Chirp,
    ),
    tested(
        object(
            "chirp_raw_hz",
            SPREAD,
            "Hz",
            1,
            "largest raw frequency deviation per element",
        ),
        ElementField::ChirpRaw,
    ),
    tested(
        scalar(
            "chirp_mean_element_hz",
            "Hz",
            1,
            "chirp of the averaged key-down",
        ),
        ElementField::Chirp,
    ),
    tested(
        scalar(
            "rise_mean_edge_ms",
            "ms",
            2,
            "10-90 % time of the mean rising edge",
        ),
        ElementField::Rise,
    ),
    tested(
        scalar(
            "fall_mean_edge_ms",
            "ms",
            2,
            "90-10 % time of the mean falling edge",
        ),
        ElementField::Fall,
    ),
    scalar("element_count", "", 0, "number of elements"),
    scalar("dit_count", "", 0, "number of dits"),
    scalar("dah_count", "", 0, "number of dahs"),
    scalar(
        "occupied_bandwidth_hz",
        "Hz",
        0,
        "99 % occupied bandwidth (ITU-R SM.328)",
    ),
    scalar(
        "necessary_bandwidth_hz",
        "Hz",
        0,
        "necessary bandwidth B*K (ITU-R SM.1138)",
    ),
    scalar(
        "occupied_to_necessary_ratio",
        "",
        2,
        "occupied over necessary bandwidth",
    ),
    object(
        "bandwidth_hz",
        XDB,
        "Hz",
        0,
        "x-dB bandwidth below the carrier line",
    ),
    scalar(
        "noise_floor_dbc",
        "dBc",
        1,
        "spectrum noise floor below the carrier line",
    ),
    object(
        "clicks",
        CLICKS,
        "dB",
        1,
        "sideband power around the edges re carrier",
    ),
    scalar(
        "backwave_db",
        "dB",
        1,
        "key-up carrier relative to key-down",
    ),
    object("hum", HUM, "", 2, "hum and ripple on the key-down carrier"),
    scalar(
        "rx_muting_db",
        "dB",
        1,
        "receiver muting depth during key-down",
    ),
    object(
        "sidetone",
        SIDETONE,
        "",
        1,
        "sidetone against a received signal",
    ),
    scalar(
        "drift_hz_per_min",
        "Hz/min",
        2,
        "pitch drift over the recording",
    ),
    scalar(
        "envelope_bandwidth_hz",
        "Hz",
        0,
        "width of cwaudit's analysis band",
    ),
    scalar(
        "rise_floor_ms",
        "ms",
        2,
        "fastest edge the analysis band can show",
    ),
];

/// Compare-only figures: medians of per-element durations by kind. They are
/// not summary fields, so they cannot be limited.
pub const DURATIONS: &[(&str, ElementField, &str)] = &[
    (
        "dit_duration_ms",
        ElementField::DitDuration,
        "median dit duration",
    ),
    (
        "dah_duration_ms",
        ElementField::DahDuration,
        "median dah duration",
    ),
];

/// The metric of this name.
pub fn find(name: &str) -> Option<&'static Metric> {
    METRICS.iter().find(|m| m.name == name)
}

/// All valid names, comma-separated (for error messages).
pub fn names() -> String {
    METRICS
        .iter()
        .map(|m| m.name)
        .collect::<Vec<_>>()
        .join(", ")
}

impl Metric {
    /// Member keys of an object figure (empty for a scalar).
    pub fn members(&self) -> &'static [Member] {
        match self.shape {
            Shape::Scalar => &[],
            Shape::Object(ms) => ms,
        }
    }

    /// The member judged when a limit names none.
    pub fn default_member(&self) -> Option<&'static str> {
        self.members().first().map(|m| m.key)
    }

    /// Unit of the value read with `stat`.
    pub fn unit_of(&self, stat: Option<&str>) -> &'static str {
        let key = stat.or(self.default_member());
        self.members()
            .iter()
            .find(|m| Some(m.key) == key)
            .and_then(|m| m.unit)
            .unwrap_or(self.unit)
    }

    /// Reads the figure from a serialized summary: `None` when the field is
    /// absent, null, not a finite number, or lacks the member.
    pub fn read(&self, summary: &Value, stat: Option<&str>) -> Option<f64> {
        let v = summary.get(self.name)?;
        let v = match self.shape {
            Shape::Scalar => v,
            Shape::Object(_) => v.get(stat.or(self.default_member())?)?,
        };
        v.as_f64().filter(|x| x.is_finite())
    }
}

/// Metrics are the same when they have the same name.
impl PartialEq for Metric {
    fn eq(&self, other: &Self) -> bool {
        self.name == other.name
    }
}
