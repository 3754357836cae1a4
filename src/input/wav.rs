//! WAV files read block by block. hound reads PCM 8/16/24/32-bit and 32-bit
//! float; 64-bit float (which hound does not read) goes through a small RIFF
//! chunk walker here. Nothing is loaded whole: memory stays constant.

use std::fs::File;
use std::io::{BufReader, Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};

use super::{FrameSource, StreamInfo};
use crate::error::{CwError, Result};

/// Sample rates the analysis is designed and tested for.
pub const MIN_RATE_HZ: u32 = 8_000;
pub const MAX_RATE_HZ: u32 = 384_000;

enum Backend {
    Hound(hound::WavReader<BufReader<File>>),
    Float64(BufReader<File>),
}

/// A WAV file opened for block-wise reading.
pub struct WavSource {
    path: PathBuf,
    info: StreamInfo,
    backend: Backend,
    frames_left: u64,
    frames_read: u64,
    int_scale: f32,
    bytes: Vec<u8>,
}

impl WavSource {
    /// Opens and checks a WAV file; every problem becomes one sentence naming it.
    pub fn open(path: &Path) -> Result<WavSource> {
        let meta = std::fs::metadata(path).map_err(|e| {
            CwError::input(
                path,
                match e.kind() {
                    std::io::ErrorKind::NotFound => "no such file".to_string(),
                    _ => format!("cannot be read ({e})"),
                },
            )
        })?;
        if meta.is_dir() {
            return Err(CwError::input(path, "is a folder, not a WAV file"));
        }
        if meta.len() == 0 {
            return Err(CwError::input(path, "is empty (zero bytes)"));
        }
        let (backend, info, frames) =
            match hound::WavReader::open(path) {
                Ok(r) => {
                    let spec = r.spec();
                    let frames = r.duration() as u64;
                    let info = StreamInfo {
                        sample_rate_hz: spec.sample_rate,
                        channels: spec.channels,
                        bits: spec.bits_per_sample,
                        sample_format: match spec.sample_format {
                            hound::SampleFormat::Int => "int".into(),
                            hound::SampleFormat::Float => "float".into(),
                        },
                        frames: Some(frames),
                    };
                    (Backend::Hound(r), info, frames)
                }
                Err(hound::Error::FormatError(m)) if m.contains("bits per sample is not 32") => {
                    open_float64(path)?
                }
                Err(hound::Error::Unsupported) => match open_float64(path) {
                    Ok(v) => v,
                    Err(_) => return Err(CwError::input(
                        path,
                        "uses a WAV encoding cwaudit cannot read (use PCM integer or IEEE float)",
                    )),
                },
                Err(e) => return Err(CwError::input(path, describe_hound_error(&e))),
            };
        if info.channels == 0 {
            return Err(CwError::input(path, "declares zero channels"));
        }
        if !(MIN_RATE_HZ..=MAX_RATE_HZ).contains(&info.sample_rate_hz) {
            return Err(CwError::input(
                path,
                format!(
                    "has a sample rate of {} Hz; cwaudit reads {} Hz to {} Hz",
                    info.sample_rate_hz, MIN_RATE_HZ, MAX_RATE_HZ
                ),
            ));
        }
        if frames == 0 {
            return Err(CwError::input(path, "holds no audio samples"));
        }
        let int_scale = if info.sample_format == "int" {
            1.0 / (1u64 << (info.bits.clamp(8, 32) - 1)) as f32
        } else {
            1.0
        };
        Ok(WavSource {
            path: path.to_path_buf(),
            info,
            backend,
            frames_left: frames,
            frames_read: 0,
            int_scale,
            bytes: Vec::new(),
        })
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    fn truncated(&self, promised: u64) -> CwError {
        CwError::input(
            &self.path,
            format!(
                "is truncated: its header promises {promised} frames but the data ends after {}",
                self.frames_read
            ),
        )
    }

    fn non_finite(&self, frame: u64) -> CwError {
        CwError::input(
            &self.path,
            format!(
                "holds a sample that is not a finite number (NaN or infinity) at frame {frame}"
            ),
        )
    }
}

fn describe_hound_error(e: &hound::Error) -> String {
    match e {
        hound::Error::IoError(io) if io.kind() == std::io::ErrorKind::UnexpectedEof => {
            "ends inside its header (truncated or not a WAV file)".into()
        }
        hound::Error::IoError(io) => format!("cannot be read ({io})"),
        hound::Error::FormatError(m) => format!("is not a usable WAV file ({m})"),
        hound::Error::TooWide => "has samples wider than 32 bits".into(),
        hound::Error::UnfinishedSample => "ends in the middle of a sample".into(),
        hound::Error::Unsupported => "uses a WAV encoding cwaudit cannot read".into(),
        hound::Error::InvalidSampleFormat => "has an invalid sample format".into(),
    }
}

/// Walks RIFF chunks for an IEEE-float file with 64-bit samples.
fn open_float64(path: &Path) -> Result<(Backend, StreamInfo, u64)> {
    let bad = |m: &str| CwError::input(path, m.to_string());
    let f = File::open(path).map_err(|e| CwError::input(path, format!("cannot be read ({e})")))?;
    let file_len = f.metadata().map(|m| m.len()).unwrap_or(0);
    let mut r = BufReader::new(f);
    let mut hdr = [0u8; 12];
    r.read_exact(&mut hdr)
        .map_err(|_| bad("ends inside its header (truncated or not a WAV file)"))?;
    if &hdr[0..4] != b"RIFF" || &hdr[8..12] != b"WAVE" {
        return Err(bad("is not a WAV file (no RIFF/WAVE header)"));
    }
    let mut fmt: Option<(u16, u16, u32, u16)> = None;
    loop {
        let mut ch = [0u8; 8];
        r.read_exact(&mut ch)
            .map_err(|_| bad("has no data chunk (truncated or not a WAV file)"))?;
        let len = u32::from_le_bytes([ch[4], ch[5], ch[6], ch[7]]) as u64;
        match &ch[0..4] {
            b"fmt " => {
                if !(16..=1024).contains(&len) {
                    return Err(bad("has a malformed format chunk"));
                }
                let mut b = vec![0u8; len as usize];
                r.read_exact(&mut b)
                    .map_err(|_| bad("ends inside its format chunk"))?;
                let mut tag = u16::from_le_bytes([b[0], b[1]]);
                let channels = u16::from_le_bytes([b[2], b[3]]);
                let rate = u32::from_le_bytes([b[4], b[5], b[6], b[7]]);
                let bits = u16::from_le_bytes([b[14], b[15]]);
                if tag == 0xFFFE && len >= 40 {
                    tag = u16::from_le_bytes([b[24], b[25]]);
                }
                fmt = Some((tag, channels, rate, bits));
                if len % 2 == 1 {
                    r.seek(SeekFrom::Current(1)).ok();
                }
            }
            b"data" => {
                let (tag, channels, rate, bits) =
                    fmt.ok_or_else(|| bad("has its data before its format chunk"))?;
                if tag != 3 || bits != 64 {
                    return Err(bad(
                        "uses a WAV encoding cwaudit cannot read (use PCM integer or IEEE float)",
                    ));
                }
                if channels == 0 {
                    return Err(bad("declares zero channels"));
                }
                let frame_bytes = 8 * channels as u64;
                let pos = r.stream_position().unwrap_or(0);
                // A streaming writer may leave the size at 0 or 0xFFFFFFFF: use what the file holds.
                let avail = file_len.saturating_sub(pos);
                let declared = if len == 0 || len == u32::MAX as u64 {
                    avail
                } else {
                    len
                };
                let frames = declared / frame_bytes;
                let info = StreamInfo {
                    sample_rate_hz: rate,
                    channels,
                    bits: 64,
                    sample_format: "float".into(),
                    frames: Some(frames),
                };
                return Ok((Backend::Float64(r), info, frames));
            }
            _ => {
                let skip = len + (len % 2);
                r.seek(SeekFrom::Current(skip as i64))
                    .map_err(|_| bad("has a malformed chunk"))?;
            }
        }
    }
}

impl FrameSource for WavSource {
    fn info(&self) -> &StreamInfo {
        &self.info
    }

    fn read_frames(&mut self, out: &mut Vec<f32>, max_frames: usize) -> Result<usize> {
        out.clear();
        let want = (max_frames as u64).min(self.frames_left) as usize;
        if want == 0 {
            return Ok(0);
        }
        let ch = self.info.channels as usize;
        let n = want * ch;
        out.reserve(n);
        match &mut self.backend {
            Backend::Hound(r) => {
                if self.info.sample_format == "float" {
                    for s in r.samples::<f32>().take(n) {
                        match s {
                            Ok(v) => out.push(v),
                            Err(_) => break,
                        }
                    }
                } else {
                    let scale = self.int_scale;
                    for s in r.samples::<i32>().take(n) {
                        match s {
                            Ok(v) => out.push(v as f32 * scale),
                            Err(_) => break,
                        }
                    }
                }
            }
            Backend::Float64(r) => {
                self.bytes.resize(n * 8, 0);
                let mut got = 0;
                while got < self.bytes.len() {
                    match r.read(&mut self.bytes[got..]) {
                        Ok(0) => break,
                        Ok(k) => got += k,
                        Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                        Err(_) => break,
                    }
                }
                for c in self.bytes[..got - got % 8].chunks_exact(8) {
                    let v = f64::from_le_bytes([c[0], c[1], c[2], c[3], c[4], c[5], c[6], c[7]]);
                    out.push(v as f32);
                }
            }
        }
        if out.len() < n {
            // Keep whole frames only; report the truncation.
            out.truncate(out.len() - out.len() % ch);
            let promised = self.frames_read + self.frames_left;
            self.frames_read += (out.len() / ch) as u64;
            self.frames_left = 0;
            return Err(self.truncated(promised));
        }
        if let Some(pos) = out.iter().position(|v| !v.is_finite()) {
            return Err(self.non_finite(self.frames_read + (pos / ch) as u64));
        }
        self.frames_read += want as u64;
        self.frames_left -= want as u64;
        Ok(want)
    }
}
