//! Command-line front end of the test-signal generator.

use super::{
    write_files, Bandpass, Chirp, EdgeShape, Hum, Mute, SampleFormat, SecondTone, SynthSpec, Warmup,
};
use anyhow::{bail, Context, Result};
use std::path::PathBuf;

/// Make a synthetic recording with known keying, and its truth file.
#[derive(clap::Args, Debug)]
pub struct SynthArgs {
    /// WAV file to write; the truth goes to the same name with .json.
    pub out: PathBuf,
    /// Start from the settings in this JSON file; flags given here win.
    #[arg(long, value_name = "FILE.json")]
    pub spec: Option<PathBuf>,
    /// Text to send in Morse.
    #[arg(long)]
    pub text: Option<String>,
    /// Speed in words per minute (PARIS timing, dit = 1.2/WPM s).
    #[arg(long)]
    pub wpm: Option<f64>,
    /// Dah length as a multiple of the dit length.
    #[arg(long, value_name = "RATIO")]
    pub dah_ratio: Option<f64>,
    /// Dit length over the space that follows it (1 = standard).
    #[arg(long, value_name = "RATIO")]
    pub mark_space: Option<f64>,
    /// Tone pitch in Hz.
    #[arg(long, value_name = "HZ")]
    pub pitch: Option<f64>,
    /// Sample rate in Hz.
    #[arg(long, value_name = "HZ")]
    pub rate: Option<u32>,
    /// Sample format of the WAV file.
    #[arg(long, value_enum)]
    pub format: Option<SampleFormat>,
    /// Key-down level in dBFS (a full-scale sine is 0 dBFS).
    #[arg(long, value_name = "DBFS", allow_negative_numbers = true)]
    pub level: Option<f64>,
    /// Rise time, 10 % to 90 %, in ms (0 = hard keying).
    #[arg(long, value_name = "MS")]
    pub rise: Option<f64>,
    /// Fall time, 90 % to 10 %, in ms (0 = hard keying).
    #[arg(long, value_name = "MS")]
    pub fall: Option<f64>,
    /// Shape of the rising edges.
    #[arg(long, value_enum)]
    pub rise_shape: Option<EdgeShape>,
    /// Shape of the falling edges.
    #[arg(long, value_enum)]
    pub fall_shape: Option<EdgeShape>,
    /// Chirp that decays exponentially after each key-down: depth in Hz, time constant in ms.
    #[arg(
        long,
        value_name = "DEPTH_HZ,TAU_MS",
        allow_negative_numbers = true,
        conflicts_with = "chirp_linear"
    )]
    pub chirp_exp: Option<String>,
    /// Chirp that falls linearly to zero by the end of each element: depth in Hz.
    #[arg(long, value_name = "DEPTH_HZ", allow_negative_numbers = true)]
    pub chirp_linear: Option<f64>,
    /// Carrier left during key-up, in dB relative to key-down (e.g. -40).
    #[arg(long, value_name = "DB", allow_negative_numbers = true)]
    pub backwave: Option<f64>,
    /// Hum on the carrier: frequency in Hz, AM depth in %, FM deviation in Hz.
    #[arg(long, value_name = "FREQ_HZ,AM_PERCENT,FM_HZ")]
    pub hum: Option<String>,
    /// Steady pitch drift over the recording, in Hz per minute.
    #[arg(long, value_name = "HZ_PER_MIN", allow_negative_numbers = true)]
    pub drift: Option<f64>,
    /// Add white noise: key-down carrier power over noise power in the noise bandwidth, dB.
    #[arg(long, value_name = "DB", allow_negative_numbers = true)]
    pub snr: Option<f64>,
    /// Bandwidth in which the SNR is stated, Hz.
    #[arg(long, value_name = "HZ")]
    pub noise_bandwidth: Option<f64>,
    /// Receiver filter: Butterworth band-pass edges in Hz and total order (2, 4, 6, 8; default 4).
    #[arg(long, value_name = "LOW_HZ,HIGH_HZ[,ORDER]")]
    pub bandpass: Option<String>,
    /// Add a second tone: pitch in Hz, level in dB relative to the main tone.
    #[arg(long, value_name = "PITCH_HZ,LEVEL_DB", allow_negative_numbers = true)]
    pub second: Option<String>,
    /// Text of the second tone (default: the main text).
    #[arg(long)]
    pub second_text: Option<String>,
    /// Speed of the second tone (default: the main speed).
    #[arg(long, value_name = "WPM")]
    pub second_wpm: Option<f64>,
    /// Make the second tone steady instead of keyed.
    #[arg(long)]
    pub second_steady: bool,
    /// Add another tone (repeatable): pitch in Hz, level in dB relative to
    /// the main tone, and 1 to make it steady (default 0: keyed with the
    /// second tone's text and speed rules).
    #[arg(
        long,
        value_name = "PITCH_HZ,LEVEL_DB[,STEADY]",
        allow_negative_numbers = true
    )]
    pub extra: Vec<String>,
    /// Warm-up drift: the pitch moves by HZ in all, settling exponentially
    /// with time constant TAU_S from the start of the file.
    #[arg(long, value_name = "HZ,TAU_S", allow_negative_numbers = true)]
    pub warmup: Option<String>,
    /// Receive muting in the rig's own audio: noise and the other tones drop
    /// by DEPTH_DB from each key-down until HANG_MS after its fall (default 0).
    #[arg(long, value_name = "DEPTH_DB[,HANG_MS]")]
    pub mute: Option<String>,
    /// Number of channels (1 or 2).
    #[arg(long)]
    pub channels: Option<u16>,
    /// Channel (1-based) that carries the tones; the other gets only noise.
    #[arg(long, value_name = "N")]
    pub signal_channel: Option<u16>,
    /// Key-up time before the first element, s.
    #[arg(long, value_name = "S")]
    pub lead_in: Option<f64>,
    /// Key-up time after the last element, s.
    #[arg(long, value_name = "S")]
    pub tail: Option<f64>,
    /// Send the text this many times.
    #[arg(long, value_name = "N")]
    pub repeat: Option<u32>,
    /// Seed of the noise generator.
    #[arg(long)]
    pub seed: Option<u64>,
    /// Transmit/receive timing settings (a two-channel recording).
    #[command(flatten)]
    pub txrx: TxRxArgs,
    /// Replace existing output files.
    #[arg(long)]
    pub force: bool,
}

/// Flags of a two-channel transmit/receive timing recording. Any of them
/// makes one (two channels: the rig's own audio and the monitor receiver).
#[derive(clap::Args, Debug, Default)]
pub struct TxRxArgs {
    /// Make a transmit/receive timing recording with the default settings.
    #[arg(long)]
    pub txrx: bool,
    /// Channel of the rig's own audio (sidetone and muted background); the other is the monitor receiver.
    #[arg(long, value_name = "N")]
    pub key_channel: Option<u16>,
    /// RF 50 % rise minus key 50 % rise, ms.
    #[arg(long, value_name = "MS", allow_negative_numbers = true)]
    pub rf_delay: Option<f64>,
    /// RF 50 % fall minus key 50 % fall, ms (default: the rise delay).
    #[arg(long, value_name = "MS", allow_negative_numbers = true)]
    pub rf_fall_delay: Option<f64>,
    /// Extra delay of the RF rise of each transmission's first element, ms.
    #[arg(long, value_name = "MS")]
    pub first_shortening: Option<f64>,
    /// Number of transmissions.
    #[arg(long, value_name = "N")]
    pub transmissions: Option<u32>,
    /// Key-up between transmissions, s.
    #[arg(long, value_name = "S")]
    pub pause: Option<f64>,
    /// Sidetone: pitch in Hz and level in dBFS.
    #[arg(long, value_name = "HZ,DBFS", allow_negative_numbers = true)]
    pub sidetone: Option<String>,
    /// Receiver background on the key channel: white-noise power over the whole band, dBFS.
    #[arg(long, value_name = "DBFS", allow_negative_numbers = true)]
    pub rx_background: Option<f64>,
    /// A steady received tone in the key channel's background: pitch in Hz, level in dBFS.
    #[arg(long, value_name = "HZ,DBFS", allow_negative_numbers = true)]
    pub rx_tone: Option<String>,
    /// Background attenuation while muted, dB.
    #[arg(long, value_name = "DB")]
    pub mute_depth: Option<f64>,
    /// Muting starts this long before the first key-down, ms.
    #[arg(long, value_name = "MS")]
    pub mute_lead: Option<f64>,
    /// Muting holds this long after the last key-up, ms.
    #[arg(long, value_name = "MS")]
    pub hang: Option<f64>,
    /// Then the background returns to full level along a ramp linear in dB this long, ms.
    #[arg(long, value_name = "MS")]
    pub release: Option<f64>,
    /// Make the key channel a keyer line: level at key up and key down (full
    /// scale = 1), and the time constant of an AC-coupled input in ms (none: DC).
    #[arg(long, value_name = "UP,DOWN[,AC_MS]", allow_negative_numbers = true)]
    pub keyer_line: Option<String>,
}

impl TxRxArgs {
    fn any(&self) -> bool {
        self.txrx
            || self.key_channel.is_some()
            || self.rf_delay.is_some()
            || self.rf_fall_delay.is_some()
            || self.first_shortening.is_some()
            || self.transmissions.is_some()
            || self.pause.is_some()
            || self.sidetone.is_some()
            || self.rx_background.is_some()
            || self.rx_tone.is_some()
            || self.mute_depth.is_some()
            || self.mute_lead.is_some()
            || self.hang.is_some()
            || self.release.is_some()
            || self.keyer_line.is_some()
    }

    /// Applies the flags to `s` (turning timing on when any is given).
    fn apply(&self, s: &mut SynthSpec, channels_given: bool) -> Result<()> {
        if !self.any() {
            return Ok(());
        }
        let mut t = s.txrx.take().unwrap_or_default();
        macro_rules! put {
            ($($field:ident = $arg:expr),* $(,)?) => {$(if let Some(v) = $arg { t.$field = v; })*};
        }
        put!(
            key_channel = self.key_channel,
            delay_ms = self.rf_delay,
            first_shortening_ms = self.first_shortening,
            transmissions = self.transmissions,
            pause_s = self.pause,
            background_dbfs = self.rx_background,
            mute_depth_db = self.mute_depth,
            mute_lead_ms = self.mute_lead,
            hang_ms = self.hang,
            release_ms = self.release,
        );
        if let Some(v) = self.rf_fall_delay {
            t.fall_delay_ms = Some(v);
        }
        if let Some(v) = &self.sidetone {
            let v = numbers("sidetone", v, 2, 2)?;
            t.sidetone_hz = v[0];
            t.sidetone_dbfs = v[1];
        }
        if let Some(v) = &self.rx_tone {
            let v = numbers("rx-tone", v, 2, 2)?;
            t.rx_tone_hz = Some(v[0]);
            t.rx_tone_dbfs = v[1];
        }
        if let Some(v) = &self.keyer_line {
            let v = numbers("keyer-line", v, 2, 3)?;
            t.keyer_line = Some(super::txrx::KeyerLine {
                up_fs: v[0],
                down_fs: v[1],
                ac_coupling_ms: v.get(2).copied(),
            });
        }
        if !channels_given {
            s.channels = 2;
        }
        s.txrx = Some(t);
        Ok(())
    }
}

/// Splits "a,b[,c]" into numbers, naming the option in the error.
fn numbers(opt: &str, s: &str, min: usize, max: usize) -> Result<Vec<f64>> {
    let v: Result<Vec<f64>, _> = s.split(',').map(|p| p.trim().parse::<f64>()).collect();
    match v {
        Ok(v) if (min..=max).contains(&v.len()) => Ok(v),
        _ => bail!(
            "--{opt} expects {} comma-separated numbers, got {s:?}.",
            if min == max {
                min.to_string()
            } else {
                format!("{min} to {max}")
            }
        ),
    }
}

/// The spec: defaults, then the JSON file, then the flags.
pub fn build_spec(a: &SynthArgs) -> Result<SynthSpec> {
    let mut s = match &a.spec {
        Some(p) => {
            let text = std::fs::read_to_string(p)
                .with_context(|| format!("cannot read {}", p.display()))?;
            serde_json::from_str(&text)
                .with_context(|| format!("{} is not a valid signal description", p.display()))?
        }
        None => SynthSpec::default(),
    };
    macro_rules! set {
        ($($field:ident = $arg:expr),* $(,)?) => {$(if let Some(v) = $arg.clone() { s.$field = v; })*};
    }
    set!(
        text = a.text,
        wpm = a.wpm,
        dah_dit_ratio = a.dah_ratio,
        mark_space_ratio = a.mark_space,
        pitch_hz = a.pitch,
        sample_rate_hz = a.rate,
        format = a.format,
        level_dbfs = a.level,
        rise_ms = a.rise,
        fall_ms = a.fall,
        rise_shape = a.rise_shape,
        fall_shape = a.fall_shape,
        drift_hz_per_min = a.drift,
        noise_bandwidth_hz = a.noise_bandwidth,
        channels = a.channels,
        signal_channel = a.signal_channel,
        lead_in_s = a.lead_in,
        tail_s = a.tail,
        repeat = a.repeat,
        seed = a.seed,
    );
    if let Some(c) = &a.chirp_exp {
        let v = numbers("chirp-exp", c, 2, 2)?;
        s.chirp = Chirp::Exponential {
            depth_hz: v[0],
            tau_ms: v[1],
        };
    }
    if let Some(d) = a.chirp_linear {
        s.chirp = Chirp::Linear { depth_hz: d };
    }
    if let Some(b) = a.backwave {
        s.backwave_db = Some(b);
    }
    if let Some(h) = &a.hum {
        let v = numbers("hum", h, 3, 3)?;
        s.hum = Some(Hum {
            frequency_hz: v[0],
            am_percent: v[1],
            fm_hz: v[2],
        });
    }
    if let Some(snr) = a.snr {
        s.snr_db = Some(snr);
    }
    if let Some(b) = &a.bandpass {
        let v = numbers("bandpass", b, 2, 3)?;
        let order = match v.get(2) {
            Some(&o) if o.fract() == 0.0 && o >= 0.0 => o as u32,
            Some(_) => bail!("--bandpass order must be a whole number (2, 4, 6 or 8)."),
            None => 4,
        };
        s.rx_bandpass = Some(Bandpass {
            low_hz: v[0],
            high_hz: v[1],
            order,
        });
    }
    if let Some(t) = &a.second {
        let v = numbers("second", t, 2, 2)?;
        let mut st = s.second.take().unwrap_or_default();
        st.pitch_hz = v[0];
        st.level_db = v[1];
        s.second = Some(st);
    }
    a.txrx.apply(&mut s, a.channels.is_some())?;
    let second_flags = a.second_text.is_some() || a.second_wpm.is_some() || a.second_steady;
    if second_flags {
        let Some(st) = s.second.as_mut() else {
            bail!("--second-text, --second-wpm and --second-steady need a second tone (--second PITCH_HZ,LEVEL_DB).");
        };
        if let Some(t) = &a.second_text {
            st.text = Some(t.clone());
        }
        if let Some(w) = a.second_wpm {
            st.wpm = Some(w);
        }
        if a.second_steady {
            st.keyed = false;
        }
    }
    for e in &a.extra {
        let v = numbers("extra", e, 2, 3)?;
        s.extra_tones.push(SecondTone {
            pitch_hz: v[0],
            level_db: v[1],
            keyed: v.get(2).is_none_or(|&x| x == 0.0),
            ..SecondTone::default()
        });
    }
    if let Some(w) = &a.warmup {
        let v = numbers("warmup", w, 2, 2)?;
        s.warmup = Some(Warmup {
            hz: v[0],
            tau_s: v[1],
        });
    }
    if let Some(m) = &a.mute {
        let v = numbers("mute", m, 1, 2)?;
        s.mute = Some(Mute {
            depth_db: v[0],
            hang_ms: v.get(1).copied().unwrap_or(0.0),
        });
    }
    Ok(s)
}

/// Writes the WAV and truth files and prints one line about them.
pub fn run(args: &SynthArgs) -> Result<()> {
    let spec = build_spec(args)?;
    let truth = write_files(&spec, &args.out, args.force)?;
    let mut line = format!(
        "wrote {} and {}: {:.3} s, {} elements",
        args.out.display(),
        super::truth_path(&args.out).display(),
        truth.duration_s,
        truth.elements.len()
    );
    if !truth.second_elements.is_empty() {
        line += &format!(" (+{} of the second tone)", truth.second_elements.len());
    }
    if let Some(t) = &truth.txrx {
        line += &format!(
            " in {} transmissions (key channel {}, RF channel {})",
            t.transmissions.len(),
            t.key_channel,
            t.rf_channel
        );
    }
    if truth.clipped_samples > 0 {
        line += &format!(", {} samples clipped at full scale", truth.clipped_samples);
    }
    println!("{line}");
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::Parser;

    #[derive(clap::Parser)]
    struct Wrap {
        #[command(flatten)]
        args: SynthArgs,
    }

    fn parse(v: &[&str]) -> SynthArgs {
        Wrap::try_parse_from(std::iter::once("x").chain(v.iter().copied()))
            .unwrap()
            .args
    }

    #[test]
    fn flags_fill_the_spec() {
        let a = parse(&[
            "o.wav",
            "--wpm",
            "25",
            "--level",
            "-20",
            "--chirp-exp",
            "30,4",
            "--hum",
            "100,5,2",
            "--bandpass",
            "300,2700",
            "--second",
            "900,-10",
            "--second-steady",
            "--rise-shape",
            "gaussian",
            "--format",
            "f64",
            "--backwave",
            "-45",
        ]);
        let s = build_spec(&a).unwrap();
        assert_eq!(s.wpm, 25.0);
        assert_eq!(s.level_dbfs, -20.0);
        assert_eq!(
            s.chirp,
            Chirp::Exponential {
                depth_hz: 30.0,
                tau_ms: 4.0
            }
        );
        assert_eq!(s.hum.unwrap().am_percent, 5.0);
        assert_eq!(s.rx_bandpass.unwrap().order, 4);
        assert!(!s.second.as_ref().unwrap().keyed);
        assert_eq!(s.rise_shape, EdgeShape::Gaussian);
        assert_eq!(s.format, SampleFormat::F64);
        assert_eq!(s.backwave_db, Some(-45.0));
    }

    #[test]
    fn timing_flags_make_a_two_channel_spec() {
        let s = build_spec(&parse(&[
            "o.wav",
            "--rf-delay",
            "12",
            "--first-shortening",
            "4",
            "--hang",
            "250",
            "--sidetone",
            "650,-15",
            "--rx-tone",
            "1200,-35",
        ]))
        .unwrap();
        assert_eq!(s.channels, 2);
        let t = s.txrx.unwrap();
        assert_eq!(t.delay_ms, 12.0);
        assert_eq!(t.fall_delay_ms, None);
        assert_eq!(t.first_shortening_ms, 4.0);
        assert_eq!(t.hang_ms, 250.0);
        assert_eq!((t.sidetone_hz, t.sidetone_dbfs), (650.0, -15.0));
        assert_eq!(t.rx_tone_hz, Some(1200.0));
        assert!(build_spec(&parse(&["o.wav"])).unwrap().txrx.is_none());
        let k = build_spec(&parse(&["o.wav", "--keyer-line", "0.5,0,20"]))
            .unwrap()
            .txrx
            .unwrap()
            .keyer_line
            .unwrap();
        assert_eq!(
            (k.up_fs, k.down_fs, k.ac_coupling_ms),
            (0.5, 0.0, Some(20.0))
        );
        assert!(build_spec(&parse(&["o.wav", "--sidetone", "650"])).is_err());
    }

    #[test]
    fn bad_lists_and_orphans_are_errors() {
        assert!(build_spec(&parse(&["o.wav", "--hum", "100,5"])).is_err());
        assert!(build_spec(&parse(&["o.wav", "--second-text", "VVV"])).is_err());
    }

    #[test]
    fn spec_file_then_flags() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("s.json");
        std::fs::write(
            &p,
            r#"{"text":"VVV","wpm":12,"chirp":{"kind":"linear","depth_hz":20}}"#,
        )
        .unwrap();
        let s = build_spec(&parse(&[
            "o.wav",
            "--spec",
            p.to_str().unwrap(),
            "--wpm",
            "15",
        ]))
        .unwrap();
        assert_eq!(s.text, "VVV");
        assert_eq!(s.wpm, 15.0);
        assert_eq!(s.chirp, Chirp::Linear { depth_hz: 20.0 });
        assert_eq!(s.pitch_hz, 700.0);
    }

    #[test]
    fn run_writes_both_files() {
        let dir = tempfile::tempdir().unwrap();
        let out = dir.path().join("v.wav");
        let a = parse(&[
            out.to_str().unwrap(),
            "--text",
            "VVV",
            "--snr",
            "30",
            "--channels",
            "2",
        ]);
        run(&a).unwrap();
        assert!(out.exists() && dir.path().join("v.json").exists());
        assert!(run(&a).is_err()); // exists, no --force
        let mut a = a;
        a.force = true;
        run(&a).unwrap();
    }
}
