//! Elements from an envelope: a comparator with hysteresis (on above 65 %,
//! off below 35 % of the way between the state levels), then glitch removal:
//! marks shorter than `min_mark` are dropped and gaps shorter than `min_gap`
//! bridged. The 50 % instants are found later on the element's own envelope;
//! here only the comparator's switching indices are produced.

/// One key-down interval as seen by the comparator (sample indices).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Mark {
    pub up: u64,
    pub down: u64,
}

/// Upper and lower comparator thresholds as fractions between the states.
pub const ON_FRACTION: f64 = 0.65;
pub const OFF_FRACTION: f64 = 0.35;

/// Streaming hysteresis segmenter.
#[derive(Clone, Debug)]
pub struct Segmenter {
    min_mark: u64,
    min_gap: u64,
    on: bool,
    up: u64,
    /// A finished mark waiting to see whether the gap after it is real.
    held: Option<Mark>,
}

impl Segmenter {
    pub fn new(min_mark: u64, min_gap: u64) -> Segmenter {
        Segmenter {
            min_mark,
            min_gap,
            on: false,
            up: 0,
            held: None,
        }
    }

    pub fn is_on(&self) -> bool {
        self.on
    }

    /// Off with no mark held: only a rise can change the state.
    pub fn is_idle(&self) -> bool {
        !self.on && self.held.is_none()
    }

    /// Index where the current mark began (if on), or the held mark's start.
    pub fn open_start(&self) -> Option<u64> {
        match (self.held, self.on) {
            (Some(m), _) => Some(m.up),
            (None, true) => Some(self.up),
            _ => None,
        }
    }

    /// Feeds sample `q` with value `v` against thresholds; returns a mark
    /// once it is final (its following gap is at least `min_gap`).
    pub fn step(&mut self, q: u64, v: f64, on_thr: f64, off_thr: f64) -> Option<Mark> {
        let mut out = None;
        if let Some(h) = self.held {
            if !self.on && q >= h.down + self.min_gap {
                out = Some(h);
                self.held = None;
            }
        }
        if !self.on && v >= on_thr {
            self.on = true;
            match self.held.take() {
                // Gap too short: bridge it, continue the held mark.
                Some(h) => self.up = h.up,
                None => self.up = q,
            }
        } else if self.on && v < off_thr {
            self.on = false;
            if q - self.up >= self.min_mark {
                self.held = Some(Mark {
                    up: self.up,
                    down: q,
                });
            }
        }
        out
    }

    /// Ends the stream: a held mark is final; an open mark is dropped (its
    /// fall was never seen) and returned separately.
    pub fn finish(&mut self, _q: u64) -> (Option<Mark>, Option<u64>) {
        let held = self.held.take();
        let open = if self.on { Some(self.up) } else { None };
        self.on = false;
        (held, open)
    }

    /// Forces the current mark closed at `q` (used for over-long key-downs).
    pub fn force_close(&mut self, q: u64) -> Option<Mark> {
        if self.on {
            self.on = false;
            self.held = None;
            let m = Mark {
                up: self.up,
                down: q,
            };
            self.up = q;
            return Some(m);
        }
        None
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn run(x: &[f64]) -> Vec<Mark> {
        let mut s = Segmenter::new(5, 5);
        let mut v: Vec<Mark> = x
            .iter()
            .enumerate()
            .filter_map(|(i, &x)| s.step(i as u64, x, 0.65, 0.35))
            .collect();
        v.extend(s.finish(x.len() as u64).0);
        v
    }

    #[test]
    fn hysteresis_ignores_chatter_and_bridges_short_gaps() {
        let mut x = vec![0.0; 100];
        x[10..30].iter_mut().for_each(|v| *v = 1.0);
        x[20] = 0.5; // chatter inside the hysteresis band
        x[31..33].iter_mut().for_each(|v| *v = 1.0); // 1-sample gap at 30: bridged
        x[60..62].iter_mut().for_each(|v| *v = 1.0); // 2-sample glitch: dropped
        x[70..90].iter_mut().for_each(|v| *v = 1.0);
        let m = run(&x);
        assert_eq!(
            m,
            vec![Mark { up: 10, down: 33 }, Mark { up: 70, down: 90 }]
        );
    }
}
