//! Signal processing: streaming blocks from samples to per-element measures.
//!
//! decimate → the real input taken down to 10-20 kHz (polyphase FIR);
//! survey → tone candidates (Welch spectrum per channel);
//! downconvert → complex baseband at the pitch (overlap-save, analytic, decimated);
//! levels → IEEE 181 state levels; segment → elements (hysteresis);
//! edges, freq → rise/fall and chirp of one element.

pub mod background;
pub mod decimate;
pub mod downconvert;
pub mod edges;
pub mod freq;
pub mod hum;
pub mod key_steps;
pub mod levels;
pub mod real_fft;
pub mod segment;
pub mod stats;
pub mod survey;
pub mod window;
