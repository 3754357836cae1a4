//! The bridge between the audio callback and the threads that write and
//! analyse: a lock-free single-producer single-consumer ring of interleaved
//! f32 samples (rtrb). The callback side never blocks and never allocates:
//! when the ring has no room for a whole buffer, the buffer is dropped and
//! counted, so the consumer sees gaps only where the counters say so.

use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::Arc;

use rtrb::{Consumer, Producer, RingBuffer};

/// Counters shared by the callback and the consumer.
#[derive(Debug, Default)]
pub struct Shared {
    /// Frames put into the ring.
    pub frames: AtomicU64,
    /// Callback buffers that found the ring full, and their frames.
    pub dropped_buffers: AtomicU64,
    pub dropped_frames: AtomicU64,
    /// Set by the callback once the frame limit is reached.
    pub done: AtomicBool,
}

impl Shared {
    pub fn frames(&self) -> u64 {
        self.frames.load(Ordering::Acquire)
    }
    pub fn dropped_buffers(&self) -> u64 {
        self.dropped_buffers.load(Ordering::Relaxed)
    }
    pub fn dropped_frames(&self) -> u64 {
        self.dropped_frames.load(Ordering::Relaxed)
    }
    pub fn done(&self) -> bool {
        self.done.load(Ordering::Acquire)
    }
}

/// A sample the callback can deliver, converted to f32 in [-1, 1).
pub trait ToF32: Copy {
    fn to_f32(self) -> f32;
}
impl ToF32 for f32 {
    fn to_f32(self) -> f32 {
        self
    }
}
impl ToF32 for i16 {
    fn to_f32(self) -> f32 {
        self as f32 / 32_768.0
    }
}
impl ToF32 for i32 {
    /// A 24-bit sample in the low bits of an i32 (ALSA S24_LE).
    fn to_f32(self) -> f32 {
        self as f32 / 8_388_608.0
    }
}

impl ToF32 for cpal::I24 {
    fn to_f32(self) -> f32 {
        self.inner() as f32 / 8_388_608.0
    }
}

/// The callback's end of the ring.
pub struct Feeder {
    prod: Producer<f32>,
    shared: Arc<Shared>,
    channels: usize,
    /// Frames still to accept; None: no limit.
    left: Option<u64>,
}

/// A ring holding `capacity_frames` frames of `channels` channels; with
/// `limit_frames`, the feeder accepts that many frames and then sets `done`.
pub fn ring(
    capacity_frames: usize,
    channels: u16,
    limit_frames: Option<u64>,
) -> (Feeder, Consumer<f32>, Arc<Shared>) {
    let ch = channels.max(1) as usize;
    let (prod, cons) = RingBuffer::new(capacity_frames.max(1) * ch);
    let shared = Arc::new(Shared::default());
    let f = Feeder {
        prod,
        shared: shared.clone(),
        channels: ch,
        left: limit_frames,
    };
    if limit_frames == Some(0) {
        shared.done.store(true, Ordering::Release);
    }
    (f, cons, shared)
}

impl Feeder {
    /// Puts one callback buffer of interleaved samples into the ring, whole
    /// or not at all. Wait-free, allocation-free.
    pub fn push<T: ToF32>(&mut self, data: &[T]) {
        let mut frames = (data.len() / self.channels) as u64;
        if let Some(left) = self.left {
            if left == 0 {
                return;
            }
            frames = frames.min(left);
        }
        let n = frames as usize * self.channels;
        match self.prod.write_chunk_uninit(n) {
            Ok(chunk) => {
                chunk.fill_from_iter(data[..n].iter().map(|s| s.to_f32()));
                self.shared.frames.fetch_add(frames, Ordering::Release);
            }
            Err(_) => {
                self.shared.dropped_buffers.fetch_add(1, Ordering::Relaxed);
                self.shared
                    .dropped_frames
                    .fetch_add(frames, Ordering::Relaxed);
            }
        }
        if let Some(left) = &mut self.left {
            *left -= frames;
            if *left == 0 {
                self.shared.done.store(true, Ordering::Release);
            }
        }
    }
}

/// Moves everything the ring holds (whole frames) into `out`; returns the
/// number of samples moved.
pub fn drain(
    cons: &mut Consumer<f32>,
    channels: u16,
    out: &mut Vec<f32>,
    max_samples: usize,
) -> usize {
    let ch = channels.max(1) as usize;
    let n = cons.slots().min(max_samples) / ch * ch;
    if n == 0 {
        return 0;
    }
    let chunk = cons
        .read_chunk(n)
        .expect("slots() said this many are readable");
    let (a, b) = chunk.as_slices();
    out.extend_from_slice(a);
    out.extend_from_slice(b);
    chunk.commit_all();
    n
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn whole_buffers_pass_in_order_and_a_full_ring_drops_and_counts() {
        // Ring of 4 frames of 2 channels: two 2-frame buffers fit, the third
        // is dropped whole and counted; after draining, pushing works again.
        let (mut f, mut c, sh) = ring(4, 2, None);
        f.push(&[1i16, 2, 3, 4]);
        f.push(&[
            5.0f32 / 32768.0,
            6.0 / 32768.0,
            7.0 / 32768.0,
            8.0 / 32768.0,
        ]);
        f.push(&[9i16, 10, 11, 12]);
        assert_eq!(
            (sh.frames(), sh.dropped_buffers(), sh.dropped_frames()),
            (4, 1, 2)
        );
        let mut out = Vec::new();
        assert_eq!(drain(&mut c, 2, &mut out, usize::MAX), 8);
        let back: Vec<i32> = out.iter().map(|x| (x * 32768.0).round() as i32).collect();
        assert_eq!(back, vec![1, 2, 3, 4, 5, 6, 7, 8]);
        f.push(&[13i16, 14]);
        out.clear();
        drain(&mut c, 2, &mut out, usize::MAX);
        assert_eq!(out.len(), 2);
    }

    #[test]
    fn the_frame_limit_cuts_the_last_buffer_and_sets_done() {
        let (mut f, mut c, sh) = ring(100, 1, Some(5));
        f.push(&[0.1f32, 0.2, 0.3]);
        assert!(!sh.done());
        f.push(&[0.4f32, 0.5, 0.6]);
        f.push(&[0.7f32]);
        assert!(sh.done());
        let mut out = Vec::new();
        drain(&mut c, 1, &mut out, usize::MAX);
        assert_eq!(out, vec![0.1, 0.2, 0.3, 0.4, 0.5]);
        assert_eq!(sh.frames(), 5);
    }

    #[test]
    fn integer_samples_convert_exactly() {
        // 16- and 24-bit codes are exact in f32 (24-bit mantissa), so the
        // writer can restore them bit for bit.
        for v in [-32768i16, -1, 0, 1, 12345, 32767] {
            assert_eq!((v.to_f32() * 32768.0) as i16, v);
        }
        for v in [-8_388_608i32, -1, 0, 1, 5_000_001, 8_388_607] {
            assert_eq!((v.to_f32() * 8_388_608.0) as i32, v);
        }
    }
}
