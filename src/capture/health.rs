//! Whether the sound card is still delivering. The stream reports errors
//! from its own thread; some pass (an overrun, a busy moment, a rerouted
//! default device) and some end the stream (the device unplugged, the audio
//! server gone). A device can also fall silent without saying so, so a
//! stream that has delivered no frame for `STALL_S` seconds counts as ended
//! too: `record` and `watch` then stop, keep what they captured, and say why,
//! instead of waiting for ever.

use std::sync::mpsc::{Receiver, Sender};
use std::time::{Duration, Instant};

/// Seconds without a new frame after which the stream counts as stopped.
/// Devices deliver every few to a few tens of milliseconds; some take a
/// second or two to start.
pub const STALL_S: u64 = 5;

/// One error the stream reported.
#[derive(Clone, Debug, PartialEq)]
pub struct StreamEvent {
    /// The stream cannot go on.
    pub fatal: bool,
    pub text: String,
}

/// Whether an error of this kind ends the stream. Unknown kinds count as
/// ending it (cpal's advice for its catch-all kind).
pub fn is_fatal(kind: cpal::ErrorKind) -> bool {
    use cpal::ErrorKind as K;
    !matches!(
        kind,
        K::Xrun
            | K::DeviceBusy
            | K::DeviceChanged
            | K::RealtimeDenied
            | K::ResourceExhausted
            | K::BackendError
    )
}

/// The stream's error callback: sends each error to `tx`, classified.
pub fn reporter(tx: Sender<StreamEvent>) -> impl FnMut(cpal::Error) + Send + 'static {
    move |e: cpal::Error| {
        let _ = tx.send(StreamEvent {
            fatal: is_fatal(e.kind()),
            text: e.to_string(),
        });
    }
}

/// What one look at the stream found.
#[derive(Debug, Default, PartialEq)]
pub struct Checkup {
    /// Errors that passed, oldest first.
    pub notices: Vec<String>,
    /// Why the stream ended, if it did.
    pub ended: Option<String>,
}

/// Watches one stream's errors and frame count.
pub struct Health {
    errors: Receiver<StreamEvent>,
    frames: u64,
    since: Instant,
    limit: Duration,
}

impl Health {
    pub fn new(errors: Receiver<StreamEvent>, now: Instant) -> Health {
        Health::with_limit(errors, now, Duration::from_secs(STALL_S))
    }

    pub fn with_limit(errors: Receiver<StreamEvent>, now: Instant, limit: Duration) -> Health {
        Health {
            errors,
            frames: 0,
            since: now,
            limit,
        }
    }

    /// Takes the errors reported since the last look and checks that
    /// `frames` (the stream's running count) moved within the limit.
    pub fn check(&mut self, frames: u64, now: Instant) -> Checkup {
        let mut c = Checkup::default();
        while let Ok(e) = self.errors.try_recv() {
            if e.fatal {
                c.ended.get_or_insert(e.text);
            } else {
                c.notices.push(e.text);
            }
        }
        if frames != self.frames {
            self.frames = frames;
            self.since = now;
        } else if c.ended.is_none() && now.duration_since(self.since) >= self.limit {
            c.ended = Some(format!(
                "no samples arrived for {} s",
                self.limit.as_secs_f64()
            ));
        }
        c
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::mpsc::channel;

    #[test]
    fn glitches_pass_and_a_lost_device_ends_the_stream() {
        assert!(!is_fatal(cpal::ErrorKind::Xrun));
        assert!(!is_fatal(cpal::ErrorKind::DeviceChanged));
        assert!(is_fatal(cpal::ErrorKind::DeviceNotAvailable));
        assert!(is_fatal(cpal::ErrorKind::HostUnavailable));
        assert!(is_fatal(cpal::ErrorKind::StreamInvalidated));
        assert!(is_fatal(cpal::ErrorKind::Other));

        let (tx, rx) = channel();
        let t0 = Instant::now();
        let mut h = Health::new(rx, t0);
        let mut report = reporter(tx);
        report(cpal::Error::from(cpal::ErrorKind::Xrun));
        let c = h.check(480, t0 + Duration::from_millis(10));
        assert_eq!((c.notices.len(), c.ended), (1, None));
        report(cpal::Error::from(cpal::ErrorKind::DeviceNotAvailable));
        report(cpal::Error::from(cpal::ErrorKind::Xrun));
        let c = h.check(960, t0 + Duration::from_millis(20));
        assert_eq!(c.notices.len(), 1);
        assert!(c.ended.is_some_and(|t| t.contains("not available")));
    }

    #[test]
    fn a_stream_that_falls_silent_ends_after_the_limit() {
        let (_tx, rx) = channel();
        let t0 = Instant::now();
        let ms = |m: u64| t0 + Duration::from_millis(m);
        let mut h = Health::with_limit(rx, t0, Duration::from_millis(500));
        // Frames keep coming: never stalled, however long the run.
        for k in 1..100u64 {
            assert_eq!(h.check(k * 480, ms(k * 100)), Checkup::default());
        }
        // Then none: fine up to the limit, ended at it.
        assert_eq!(h.check(99 * 480, ms(10_000)).ended, None);
        assert_eq!(h.check(99 * 480, ms(10_399)).ended, None);
        let c = h.check(99 * 480, ms(10_400));
        assert_eq!(c.ended.as_deref(), Some("no samples arrived for 0.5 s"));
        // A device that never starts counts from the start.
        let (_tx, rx) = channel();
        let mut h = Health::with_limit(rx, t0, Duration::from_millis(500));
        assert!(h.check(0, ms(499)).ended.is_none());
        assert!(h.check(0, ms(500)).ended.is_some());
    }
}
