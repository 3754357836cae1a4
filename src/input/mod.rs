//! Inputs: anything that yields interleaved frames of f32 samples in blocks.
//! Files and (later) the sound card implement the same trait, so the DSP
//! never knows where its samples come from.

pub mod wav;

use crate::error::Result;

/// What a stream of samples is.
#[derive(Clone, Debug, PartialEq)]
pub struct StreamInfo {
    pub sample_rate_hz: u32,
    pub channels: u16,
    /// Bits per sample as stored (8, 16, 24, 32 or 64).
    pub bits: u16,
    /// "int" or "float".
    pub sample_format: String,
    /// Total frames if known in advance (files), else None (live input).
    pub frames: Option<u64>,
}

/// A block-wise source of interleaved frames scaled to [-1, 1].
pub trait FrameSource {
    fn info(&self) -> &StreamInfo;
    /// Reads up to `max_frames` frames into `out` (cleared first, interleaved).
    /// Returns the number of frames read; 0 means the end of the stream.
    fn read_frames(&mut self, out: &mut Vec<f32>, max_frames: usize) -> Result<usize>;
}
