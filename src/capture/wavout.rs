//! The WAV file a recording goes to: written into a temporary file beside
//! the target and renamed into place when finished, so an interrupted or
//! failed recording never leaves half a file under the user's name, and an
//! existing file is replaced only with `--force`.

use std::fs::File;
use std::io::BufWriter;
use std::path::{Path, PathBuf};

use tempfile::TempPath;

use crate::error::{CwError, Result};

/// Sample format of a stream and of the file written from it.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    /// 16-bit integer.
    S16,
    /// 24-bit integer.
    S24,
    /// 32-bit float.
    F32,
}

impl Format {
    pub fn bits(self) -> u16 {
        match self {
            Format::S16 => 16,
            Format::S24 => 24,
            Format::F32 => 32,
        }
    }
    pub fn name(self) -> &'static str {
        match self {
            Format::S16 => "s16",
            Format::S24 => "s24",
            Format::F32 => "f32",
        }
    }
}

/// A WAV file being written.
pub struct WavSink {
    path: PathBuf,
    tmp: Option<TempPath>,
    w: Option<hound::WavWriter<BufWriter<File>>>,
    format: Format,
    overwrite: bool,
    frames: u64,
    channels: u16,
}

/// Refuses an existing output file unless `overwrite`.
pub fn check_free(path: &Path, overwrite: bool) -> Result<()> {
    if path.exists() && !overwrite {
        return Err(CwError::output(
            path,
            "already exists; pass --force to replace it",
        ));
    }
    Ok(())
}

impl WavSink {
    pub fn create(
        path: &Path,
        rate: u32,
        channels: u16,
        format: Format,
        overwrite: bool,
    ) -> Result<WavSink> {
        check_free(path, overwrite)?;
        let dir = match path.parent() {
            Some(p) if !p.as_os_str().is_empty() => p,
            _ => Path::new("."),
        };
        let err =
            |e: &dyn std::fmt::Display| CwError::output(path, format!("cannot be written ({e})"));
        let tmp = tempfile::Builder::new()
            .prefix(".cwaudit-rec-")
            .suffix(".wav")
            .tempfile_in(dir)
            .map_err(|e| err(&e))?;
        let (file, tpath) = tmp.into_parts();
        let spec = hound::WavSpec {
            channels,
            sample_rate: rate,
            bits_per_sample: format.bits(),
            sample_format: if format == Format::F32 {
                hound::SampleFormat::Float
            } else {
                hound::SampleFormat::Int
            },
        };
        let w = hound::WavWriter::new(BufWriter::with_capacity(1 << 16, file), spec)
            .map_err(|e| err(&e))?;
        Ok(WavSink {
            path: path.to_path_buf(),
            tmp: Some(tpath),
            w: Some(w),
            format,
            overwrite,
            frames: 0,
            channels,
        })
    }

    pub fn path(&self) -> &Path {
        &self.path
    }
    /// Frames written so far.
    pub fn frames(&self) -> u64 {
        self.frames
    }

    /// Appends interleaved samples in [-1, 1]; integer formats are rounded
    /// and clamped (16- and 24-bit input comes back bit for bit).
    pub fn write(&mut self, samples: &[f32]) -> Result<()> {
        let path = self.path.clone();
        let w = self.w.as_mut().expect("write is only called before finish");
        let res = match self.format {
            Format::S16 => samples.iter().try_for_each(|&x| {
                w.write_sample((x * 32_768.0).round().clamp(-32_768.0, 32_767.0) as i16)
            }),
            Format::S24 => samples.iter().try_for_each(|&x| {
                w.write_sample(
                    (x as f64 * 8_388_608.0)
                        .round()
                        .clamp(-8_388_608.0, 8_388_607.0) as i32,
                )
            }),
            Format::F32 => samples.iter().try_for_each(|&x| w.write_sample(x)),
        };
        res.map_err(|e| CwError::output(&path, format!("cannot be written ({e})")))?;
        self.frames += (samples.len() / self.channels.max(1) as usize) as u64;
        Ok(())
    }

    /// Completes the header and moves the file into place.
    pub fn finish(mut self) -> Result<()> {
        let path = self.path.clone();
        let err =
            |e: &dyn std::fmt::Display| CwError::output(&path, format!("cannot be written ({e})"));
        let w = self.w.take().expect("finish is called once");
        w.finalize().map_err(|e| err(&e))?;
        let tmp = self.tmp.take().expect("finish is called once");
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let _ = std::fs::set_permissions(&tmp, std::fs::Permissions::from_mode(0o644));
        }
        let res = if self.overwrite {
            tmp.persist(&self.path).map(|_| ())
        } else {
            tmp.persist_noclobber(&self.path).map(|_| ())
        };
        res.map_err(|e| err(&e.error))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn samples_come_back_exactly_and_nothing_is_left_behind() {
        let d = tempfile::tempdir().unwrap();
        for f in [Format::S16, Format::S24, Format::F32] {
            let p = d.path().join(format!("{}.wav", f.name()));
            let full = match f {
                Format::S16 => 32_768.0,
                Format::S24 => 8_388_608.0,
                Format::F32 => 1.0,
            };
            let codes = [-1.0, -0.5, 0.0, 0.25, 0.999, 1.5];
            let x: Vec<f32> = codes
                .iter()
                .map(|c: &f64| ((c * full).round() / full) as f32)
                .collect();
            let mut s = WavSink::create(&p, 8000, 2, f, false).unwrap();
            s.write(&x).unwrap();
            assert_eq!(s.frames(), 3);
            s.finish().unwrap();
            let mut r = hound::WavReader::open(&p).unwrap();
            assert_eq!(r.spec().bits_per_sample, f.bits());
            assert_eq!(r.duration(), 3);
            let back: Vec<f64> = if f == Format::F32 {
                r.samples::<f32>().map(|v| v.unwrap() as f64).collect()
            } else {
                r.samples::<i32>()
                    .map(|v| v.unwrap() as f64 / full)
                    .collect()
            };
            for (a, b) in x.iter().zip(&back) {
                // Above full scale (1.5) is clamped to the largest code.
                let want = (*a as f64).min((full - 1.0) / full).max(-1.0);
                let want = if f == Format::F32 { *a as f64 } else { want };
                assert_eq!(*b, want, "{f:?}");
            }
        }
        // One file per format and no temporary files.
        assert_eq!(std::fs::read_dir(d.path()).unwrap().count(), 3);
    }

    #[test]
    fn an_existing_file_is_kept_without_force_and_an_unfinished_one_vanishes() {
        let d = tempfile::tempdir().unwrap();
        let p = d.path().join("a.wav");
        std::fs::write(&p, b"mine").unwrap();
        let e = WavSink::create(&p, 8000, 1, Format::S16, false)
            .err()
            .unwrap();
        assert!(e.to_string().contains("--force"), "{e}");
        let mut s = WavSink::create(&p, 8000, 1, Format::S16, true).unwrap();
        s.write(&[0.1, 0.2]).unwrap();
        drop(s);
        assert_eq!(std::fs::read(&p).unwrap(), b"mine");
        assert_eq!(std::fs::read_dir(d.path()).unwrap().count(), 1);
    }
}
