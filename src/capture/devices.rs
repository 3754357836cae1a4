//! Sound-card input devices: listing what each can record, finding one by
//! name, and choosing a stream configuration from the user's options.

use cpal::traits::{DeviceTrait, HostTrait};
use cpal::{SampleFormat, SupportedStreamConfigRange};

use super::wavout::Format;
use crate::error::{CwError, Result};

/// What one input device offers.
#[derive(Clone, Debug, PartialEq)]
pub struct DeviceInfo {
    /// The host's name for the device (what `--device` matches first).
    pub name: String,
    /// Human-readable description lines.
    pub description: Vec<String>,
    pub is_default: bool,
    /// (channels, format, min rate, max rate) for each supported range.
    pub configs: Vec<(u16, String, u32, u32)>,
    /// Why the configurations could not be read, if they could not.
    pub error: Option<String>,
}

fn format_name(f: SampleFormat) -> String {
    match f {
        SampleFormat::I16 => "s16".into(),
        SampleFormat::I24 => "s24".into(),
        SampleFormat::F32 => "f32".into(),
        other => other.to_string(),
    }
}

fn to_cpal(f: Format) -> SampleFormat {
    match f {
        Format::S16 => SampleFormat::I16,
        Format::S24 => SampleFormat::I24,
        Format::F32 => SampleFormat::F32,
    }
}

fn device_name(d: &cpal::Device) -> String {
    d.id()
        .map(|i| i.id().to_string())
        .or_else(|_| d.description().map(|x| x.name().to_string()))
        .unwrap_or_else(|_| "(unnamed)".into())
}

fn description_lines(d: &cpal::Device) -> Vec<String> {
    match d.description() {
        Ok(desc) => {
            let mut v = vec![desc.name().to_string()];
            v.extend(desc.extended().map(str::to_string));
            v.dedup();
            v
        }
        Err(_) => vec![],
    }
}

fn input_devices() -> Result<Vec<cpal::Device>> {
    let host = cpal::default_host();
    let devs = host.input_devices().map_err(|e| {
        CwError::Usage(format!(
            "the sound system could not list input devices ({e})"
        ))
    })?;
    Ok(devs.collect())
}

fn default_name() -> Option<String> {
    cpal::default_host()
        .default_input_device()
        .map(|d| device_name(&d))
}

/// Every input device with what it supports; the system default first
/// when the sound system does not list it itself.
pub fn list() -> Result<Vec<DeviceInfo>> {
    let def = default_name();
    let mut devs = input_devices()?;
    if let Some(d) = cpal::default_host().default_input_device() {
        if !devs.iter().any(|x| device_name(x) == device_name(&d)) {
            devs.insert(0, d);
        }
    }
    Ok(devs
        .iter()
        .map(|d| {
            let name = device_name(d);
            let (configs, error) = match d.supported_input_configs() {
                Ok(c) => (
                    c.map(|r| {
                        (
                            r.channels(),
                            format_name(r.sample_format()),
                            r.min_sample_rate(),
                            r.max_sample_rate(),
                        )
                    })
                    .collect(),
                    None,
                ),
                Err(e) => (vec![], Some(e.to_string())),
            };
            DeviceInfo {
                is_default: def.as_deref() == Some(name.as_str()),
                description: description_lines(d),
                name,
                configs,
                error,
            }
        })
        .collect())
}

/// The device list as text: one block per device, the default marked.
pub fn render(list: &[DeviceInfo]) -> String {
    use std::fmt::Write;
    let mut s = String::new();
    if list.is_empty() {
        s.push_str("No input devices were found.\n");
    }
    for d in list {
        let mark = if d.is_default { "  [default]" } else { "" };
        let _ = writeln!(s, "{}{mark}", d.name);
        for l in &d.description {
            let _ = writeln!(s, "    {l}");
        }
        if let Some(e) = &d.error {
            let _ = writeln!(s, "    (cannot be opened now: {e})");
            continue;
        }
        // Merge the ranges: rates per (channels, format).
        let mut chans: Vec<u16> = d.configs.iter().map(|c| c.0).collect();
        chans.sort_unstable();
        chans.dedup();
        let mut fmts: Vec<String> = d.configs.iter().map(|c| c.1.clone()).collect();
        fmts.sort();
        fmts.dedup();
        let lo = d.configs.iter().map(|c| c.2).min();
        let hi = d.configs.iter().map(|c| c.3).max();
        let list = |v: Vec<String>| v.join(", ");
        if let (Some(lo), Some(hi)) = (lo, hi) {
            let rates = if lo == hi {
                format!("{lo} Hz")
            } else {
                let common: Vec<String> = COMMON_RATES
                    .iter()
                    .filter(|&&r| r >= lo && r <= hi)
                    .map(|r| r.to_string())
                    .collect();
                format!("{lo} to {hi} Hz (common: {})", common.join(", "))
            };
            let _ = writeln!(s, "    sample rates: {rates}");
            let _ = writeln!(s, "    channels: {}", runs(&chans));
            let _ = writeln!(s, "    sample formats: {}", list(fmts));
        } else {
            let _ = writeln!(s, "    (no input configurations)");
        }
    }
    s
}

/// "1, 2, 4 to 8": consecutive numbers joined into ranges.
fn runs(v: &[u16]) -> String {
    let mut out: Vec<String> = Vec::new();
    let mut i = 0;
    while i < v.len() {
        let mut j = i;
        while j + 1 < v.len() && v[j + 1] == v[j] + 1 {
            j += 1;
        }
        out.push(if j >= i + 2 {
            format!("{} to {}", v[i], v[j])
        } else if j == i + 1 {
            format!("{}, {}", v[i], v[j])
        } else {
            v[i].to_string()
        });
        i = j + 1;
    }
    out.join(", ")
}

const COMMON_RATES: [u32; 8] = [8000, 16000, 22050, 32000, 44100, 48000, 96000, 192000];

/// Finds a device: the default one, or the first whose name or description
/// contains `pattern` (case-insensitive); an exact name wins.
pub fn find(pattern: Option<&str>) -> Result<cpal::Device> {
    let Some(p) = pattern else {
        return cpal::default_host().default_input_device().ok_or_else(|| {
            CwError::Usage(
                "there is no default input device; give one with --device (see `cwaudit devices`)"
                    .into(),
            )
        });
    };
    let devs = input_devices()?;
    if let Some(d) = devs.iter().find(|d| device_name(d) == p) {
        return Ok(d.clone());
    }
    let lp = p.to_lowercase();
    devs.iter()
        .find(|d| {
            device_name(d).to_lowercase().contains(&lp)
                || description_lines(d)
                    .iter()
                    .any(|l| l.to_lowercase().contains(&lp))
        })
        .cloned()
        .ok_or_else(|| {
            CwError::Usage(format!(
                "no input device matches \"{p}\"; `cwaudit devices` lists them"
            ))
        })
}

/// A chosen stream: device name and configuration.
#[derive(Clone, Debug)]
pub struct Chosen {
    pub name: String,
    pub rate: u32,
    pub channels: u16,
    pub format: Format,
}

/// Picks rate, channels and format: the user's, else 48 kHz, mono and s16
/// when the device offers them, else its own default. Refuses what the
/// device does not support, with what it does.
pub fn choose(
    dev: &cpal::Device,
    rate: Option<u32>,
    channels: Option<u16>,
    format: Option<Format>,
) -> Result<Chosen> {
    let name = device_name(dev);
    let ranges: Vec<SupportedStreamConfigRange> = dev
        .supported_input_configs()
        .map_err(|e| CwError::Usage(format!("device {name} cannot be opened ({e})")))?
        .collect();
    let ours = |r: &SupportedStreamConfigRange| {
        [Format::S16, Format::S24, Format::F32]
            .into_iter()
            .find(|f| to_cpal(*f) == r.sample_format())
    };
    let fits = |r: &SupportedStreamConfigRange, rt: u32, ch: u16, f: Format| {
        r.channels() == ch
            && to_cpal(f) == r.sample_format()
            && r.min_sample_rate() <= rt
            && rt <= r.max_sample_rate()
    };
    let def = dev.default_input_config().ok();
    let rates = [
        rate.unwrap_or(48_000),
        def.as_ref().map_or(48_000, |d| d.sample_rate()),
    ];
    let chans = [
        channels.unwrap_or(1),
        def.as_ref().map_or(1, |d| d.channels()),
    ];
    let fmts: Vec<Format> = match format {
        Some(f) => vec![f],
        None => [Format::S16]
            .into_iter()
            .chain(def.as_ref().and_then(|d| {
                ranges
                    .iter()
                    .find(|r| r.sample_format() == d.sample_format())
                    .and_then(ours)
            }))
            .chain([Format::F32, Format::S24])
            .collect(),
    };
    for &rt in rates.iter().take(if rate.is_some() { 1 } else { 2 }) {
        for &ch in chans.iter().take(if channels.is_some() { 1 } else { 2 }) {
            for &f in &fmts {
                if ranges.iter().any(|r| fits(r, rt, ch, f)) {
                    return Ok(Chosen {
                        name,
                        rate: rt,
                        channels: ch,
                        format: f,
                    });
                }
            }
        }
    }
    let offer: Vec<String> = ranges
        .iter()
        .map(|r| {
            format!(
                "{} ch {} {}-{} Hz",
                r.channels(),
                format_name(r.sample_format()),
                r.min_sample_rate(),
                r.max_sample_rate()
            )
        })
        .collect();
    Err(CwError::Usage(format!(
        "device {name} cannot record {} Hz, {} channel(s), {}; it offers: {}",
        rates[0],
        chans[0],
        format.map_or("s16, s24 or f32", Format::name),
        if offer.is_empty() {
            "nothing".into()
        } else {
            offer.join("; ")
        }
    )))
}

/// Opens an input stream that hands every callback buffer, as f32, to `feed`.
pub fn open_stream<F>(
    dev: &cpal::Device,
    c: &Chosen,
    mut feeder: super::bridge::Feeder,
    on_error: F,
) -> Result<cpal::Stream>
where
    F: FnMut(cpal::Error) + Send + 'static,
{
    let cfg = cpal::StreamConfig {
        channels: c.channels,
        sample_rate: c.rate,
        buffer_size: cpal::BufferSize::Default,
    };
    let res = match c.format {
        Format::S16 => {
            dev.build_input_stream::<i16, _, _>(cfg, move |d, _| feeder.push(d), on_error, None)
        }
        Format::S24 => dev.build_input_stream::<cpal::I24, _, _>(
            cfg,
            move |d, _| feeder.push(d),
            on_error,
            None,
        ),
        Format::F32 => {
            dev.build_input_stream::<f32, _, _>(cfg, move |d, _| feeder.push(d), on_error, None)
        }
    };
    res.map_err(|e| {
        CwError::Usage(format!(
            "device {} could not be opened for recording ({e})",
            c.name
        ))
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn channel_lists_are_shown_as_ranges() {
        assert_eq!(runs(&[1, 2]), "1, 2");
        assert_eq!(runs(&[1, 2, 3, 4, 8]), "1 to 4, 8");
        assert_eq!(runs(&[2, 6, 7, 8]), "2, 6 to 8");
        assert_eq!(runs(&[]), "");
    }
}
