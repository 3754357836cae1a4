//! cwaudit: measures the keying quality of a CW transmitter from receiver audio.
//!
//! Layers: [`input`] (WAV files, later the sound card) → [`dsp`] (streaming
//! blocks) → [`analysis`] (a plain [`analysis::report::Report`]) →
//! [`present`] (terminal, JSON, CSV). [`synth`] makes test signals with
//! stated truth.

pub mod accuracy;
pub mod accuracy_txrx;
pub mod analysis;
pub mod batch;
#[cfg(feature = "capture")]
pub mod capture;
pub mod cli;
pub mod compare;
pub mod demo;
pub mod dsp;
pub mod error;
pub mod fsutil;
pub mod input;
pub mod judge;
pub mod present;
pub mod synth;
