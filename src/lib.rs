//! cwaudit: measures the keying quality of a CW transmitter from receiver audio.

pub mod synth;
