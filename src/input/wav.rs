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

/// How samples are stored: bytes per sample and whether they are float.
#[derive(Clone, Copy, Debug)]
struct Encoding {
    bytes: usize,
    float: bool,
}

/// A WAV file opened for block-wise reading.
pub struct WavSource {
    path: PathBuf,
    info: StreamInfo,
    reader: BufReader<File>,
    enc: Encoding,
    frames_left: u64,
    frames_read: u64,
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
        // hound checks the header; the samples are then read block-wise
        // straight from the data chunk (hound's per-sample reads are slow).
        let (info, frames) =
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
                    (info, frames)
                }
                Err(hound::Error::FormatError(m)) if m.contains("bits per sample is not 32") => {
                    float64_info(path)?
                }
                Err(hound::Error::Unsupported) => match float64_info(path) {
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
        let lay = riff_layout(path)?;
        let bytes = lay.block_align as usize / info.channels as usize;
        let float = info.sample_format == "float";
        if bytes == 0 || (float && bytes != 4 && bytes != 8) || (!float && bytes > 4) {
            return Err(CwError::input(path, "has an inconsistent format chunk"));
        }
        // Blocks are read whole; a buffer smaller than a block lets those
        // reads go straight into ours instead of through a second copy.
        let mut reader = BufReader::with_capacity(
            1 << 12,
            File::open(path).map_err(|e| CwError::input(path, format!("cannot be read ({e})")))?,
        );
        reader
            .seek(SeekFrom::Start(lay.data_offset))
            .map_err(|_| CwError::input(path, "has a data chunk past its end"))?;
        Ok(WavSource {
            path: path.to_path_buf(),
            info,
            reader,
            enc: Encoding { bytes, float },
            frames_left: frames,
            frames_read: 0,
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

/// Where a WAV file's samples are, from its RIFF chunks.
#[derive(Clone, Copy, Debug)]
struct Layout {
    tag: u16,
    channels: u16,
    rate: u32,
    bits: u16,
    block_align: u16,
    data_offset: u64,
    data_len: u64,
}

/// Walks the RIFF chunks up to the data chunk.
fn riff_layout(path: &Path) -> Result<Layout> {
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
    let mut fmt: Option<(u16, u16, u32, u16, u16)> = None;
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
                let align = u16::from_le_bytes([b[12], b[13]]);
                let bits = u16::from_le_bytes([b[14], b[15]]);
                if tag == 0xFFFE && len >= 40 {
                    tag = u16::from_le_bytes([b[24], b[25]]);
                }
                fmt = Some((tag, channels, rate, bits, align));
                if len % 2 == 1 {
                    r.seek(SeekFrom::Current(1)).ok();
                }
            }
            b"data" => {
                let (tag, channels, rate, bits, block_align) =
                    fmt.ok_or_else(|| bad("has its data before its format chunk"))?;
                let pos = r.stream_position().unwrap_or(0);
                // A streaming writer may leave the size at 0 or 0xFFFFFFFF: use what the file holds.
                let avail = file_len.saturating_sub(pos);
                let data_len = if len == 0 || len == u32::MAX as u64 {
                    avail
                } else {
                    len
                };
                return Ok(Layout {
                    tag,
                    channels,
                    rate,
                    bits,
                    block_align,
                    data_offset: pos,
                    data_len,
                });
            }
            _ => {
                let skip = len + (len % 2);
                r.seek(SeekFrom::Current(skip as i64))
                    .map_err(|_| bad("has a malformed chunk"))?;
            }
        }
    }
}

/// Stream description of an IEEE-float file with 64-bit samples (which hound does not read).
fn float64_info(path: &Path) -> Result<(StreamInfo, u64)> {
    let l = riff_layout(path)?;
    if l.tag != 3 || l.bits != 64 {
        return Err(CwError::input(
            path,
            "uses a WAV encoding cwaudit cannot read (use PCM integer or IEEE float)",
        ));
    }
    if l.channels == 0 {
        return Err(CwError::input(path, "declares zero channels"));
    }
    let frames = l.data_len / (8 * l.channels as u64);
    let info = StreamInfo {
        sample_rate_hz: l.rate,
        channels: l.channels,
        bits: 64,
        sample_format: "float".into(),
        frames: Some(frames),
    };
    Ok((info, frames))
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
        let nbytes = n * self.enc.bytes;
        self.bytes.resize(nbytes, 0);
        let mut got = 0;
        while got < nbytes {
            match self.reader.read(&mut self.bytes[got..]) {
                Ok(0) => break,
                Ok(k) => got += k,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(_) => break,
            }
        }
        let raw = &self.bytes[..got - got % self.enc.bytes];
        // Each arm fills a slice in place (a loop the compiler vectorizes)
        // rather than pushing sample by sample.
        let m = raw.len() / self.enc.bytes;
        out.resize(m, 0.0);
        match (self.enc.float, self.enc.bytes) {
            (false, 1) => {
                for (o, &b) in out.iter_mut().zip(raw) {
                    *o = (b as f32 - 128.0) / 128.0;
                }
            }
            (false, 2) => {
                for (o, c) in out.iter_mut().zip(raw.chunks_exact(2)) {
                    *o = i16::from_le_bytes([c[0], c[1]]) as f32 / 32_768.0;
                }
            }
            (false, 3) => {
                for (o, c) in out.iter_mut().zip(raw.chunks_exact(3)) {
                    *o = (i32::from_le_bytes([0, c[0], c[1], c[2]]) >> 8) as f32 / 8_388_608.0;
                }
            }
            // 32-bit containers hold 32-bit samples or left-justified 24-bit ones.
            (false, _) => {
                for (o, c) in out.iter_mut().zip(raw.chunks_exact(4)) {
                    *o = i32::from_le_bytes([c[0], c[1], c[2], c[3]]) as f32 / 2_147_483_648.0;
                }
            }
            (true, 4) => {
                for (o, c) in out.iter_mut().zip(raw.chunks_exact(4)) {
                    *o = f32::from_le_bytes([c[0], c[1], c[2], c[3]]);
                }
            }
            (true, _) => {
                for (o, c) in out.iter_mut().zip(raw.chunks_exact(8)) {
                    *o =
                        f64::from_le_bytes([c[0], c[1], c[2], c[3], c[4], c[5], c[6], c[7]]) as f32;
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
        // Integer samples are always finite; only float data can hold NaN/inf.
        if let Some(pos) = self
            .enc
            .float
            .then(|| out.iter().position(|v| !v.is_finite()))
            .flatten()
        {
            return Err(self.non_finite(self.frames_read + (pos / ch) as u64));
        }
        self.frames_read += want as u64;
        self.frames_left -= want as u64;
        Ok(want)
    }
}
