//! Sound-card input (feature `capture`): listing devices, recording to WAV,
//! and live measurement. The audio callback only copies samples into a
//! lock-free ring (`bridge`); a writer (`record`) or the analysis thread
//! (`engine`, the same live pipeline as `analysis::live`) drains it, and
//! the display (`screen`, `watch`) only draws.

pub mod bridge;
pub mod devices;
pub mod engine;
pub mod health;
pub mod record;
pub mod screen;
pub mod watch;
pub mod wavout;
