//! Morse code table and element timing after ITU-R M.1677-1.
//!
//! Timing in units: dit = 1, dah = 3, space between elements of a character
//! = 1, between characters = 3, between words = 7, so `PARIS ` is 50 units
//! and one unit lasts 1.2 / WPM seconds.
//!
//! Weighting: the dit mark is `2·u·r/(1+r)` for a mark/space ratio `r`, so a
//! dit plus its following element space always fills 2 units; a dah mark is
//! `dah_dit_ratio` times the dit mark. Every space after a mark shrinks by as
//! much as the dit mark grew beyond 1 unit (element 2u − dit, character
//! 4u − dit, word 8u − dit), which keeps the standard values at r = 1.

use super::ElementKind;
use anyhow::{bail, Result};

/// Code for one character (upper case), `.` = dit and `-` = dah; `None` if
/// ITU-R M.1677-1 has no code for it.
pub fn code(c: char) -> Option<&'static str> {
    let c = c.to_uppercase().next().unwrap_or(c);
    Some(match c {
        'A' => ".-",
        'B' => "-...",
        'C' => "-.-.",
        'D' => "-..",
        'E' => ".",
        'É' => "..-..",
        'F' => "..-.",
        'G' => "--.",
        'H' => "....",
        'I' => "..",
        'J' => ".---",
        'K' => "-.-",
        'L' => ".-..",
        'M' => "--",
        'N' => "-.",
        'O' => "---",
        'P' => ".--.",
        'Q' => "--.-",
        'R' => ".-.",
        'S' => "...",
        'T' => "-",
        'U' => "..-",
        'V' => "...-",
        'W' => ".--",
        'X' | '×' => "-..-",
        'Y' => "-.--",
        'Z' => "--..",
        '1' => ".----",
        '2' => "..---",
        '3' => "...--",
        '4' => "....-",
        '5' => ".....",
        '6' => "-....",
        '7' => "--...",
        '8' => "---..",
        '9' => "----.",
        '0' => "-----",
        '.' => ".-.-.-",
        ',' => "--..--",
        ':' => "---...",
        '?' => "..--..",
        '\'' => ".----.",
        '-' => "-....-",
        '/' => "-..-.",
        '(' => "-.--.",
        ')' => "-.--.-",
        '"' => ".-..-.",
        '=' => "-...-",
        '+' => ".-.-.",
        '@' => ".--.-.",
        _ => return None,
    })
}

/// Mark and space lengths in seconds derived from one unit and the weighting.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Timing {
    pub dit_s: f64,
    pub dah_s: f64,
    pub element_space_s: f64,
    pub letter_space_s: f64,
    pub word_space_s: f64,
}

impl Timing {
    /// Timing for `unit_s` (1.2 / WPM) with the given weighting.
    pub fn new(unit_s: f64, dah_dit_ratio: f64, mark_space_ratio: f64) -> Timing {
        let dit = 2.0 * unit_s * mark_space_ratio / (1.0 + mark_space_ratio);
        Timing {
            dit_s: dit,
            dah_s: dah_dit_ratio * dit,
            element_space_s: 2.0 * unit_s - dit,
            letter_space_s: 4.0 * unit_s - dit,
            word_space_s: 8.0 * unit_s - dit,
        }
    }
}

/// One key-down interval: 50 % start instant and 50 %-to-50 % duration.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Mark {
    pub start_s: f64,
    pub duration_s: f64,
    pub kind: ElementKind,
}

/// Splits text into words of character codes; errors on characters without
/// a code so that a typo is not silently dropped.
pub fn encode(text: &str) -> Result<Vec<Vec<&'static str>>> {
    let mut words = Vec::new();
    for word in text.split_whitespace() {
        let mut codes = Vec::new();
        for c in word.chars() {
            match code(c) {
                Some(k) => codes.push(k),
                None => bail!("the text contains {c:?}, which has no ITU-R M.1677-1 Morse code."),
            }
        }
        words.push(codes);
    }
    if words.is_empty() {
        bail!("the text must contain at least one character to send.");
    }
    Ok(words)
}

/// Lays out the text `repeat` times (repeats separated by a word space); the
/// first mark starts at 0.
pub fn layout(text: &str, repeat: u32, timing: &Timing) -> Result<Vec<Mark>> {
    let words = encode(text)?;
    let mut marks = Vec::new();
    let mut t = 0.0f64;
    let mut pending_space = 0.0f64;
    for _ in 0..repeat {
        for word in &words {
            for letter in word {
                for e in letter.chars() {
                    t += pending_space;
                    let (kind, d) = if e == '.' {
                        (ElementKind::Dit, timing.dit_s)
                    } else {
                        (ElementKind::Dah, timing.dah_s)
                    };
                    marks.push(Mark {
                        start_s: t,
                        duration_s: d,
                        kind,
                    });
                    t += d;
                    pending_space = timing.element_space_s;
                }
                pending_space = timing.letter_space_s;
            }
            pending_space = timing.word_space_s;
        }
    }
    Ok(marks)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn paris_is_fifty_units() {
        // ITU-R M.1677-1: "PARIS " is 50 units, so the second word starts at 50.
        let timing = Timing::new(1.0, 3.0, 1.0);
        let marks = layout("PARIS PARIS", 1, &timing).unwrap();
        let per_word = marks.len() / 2;
        assert_eq!(per_word, 14); // P4 A2 R3 I2 S3 elements
        assert!((marks[per_word].start_s - 50.0).abs() < 1e-12);
        let last = marks[per_word - 1];
        // 43 units of sound and spaces, then the 7-unit word space.
        assert!((last.start_s + last.duration_s - 43.0).abs() < 1e-12);
    }

    #[test]
    fn repeat_adds_word_space() {
        // ITU-R M.1677-1: word space 7 units; "E" then "E" again at 1 + 7 = 8.
        let marks = layout("E", 2, &Timing::new(1.0, 3.0, 1.0)).unwrap();
        assert_eq!(marks.len(), 2);
        assert!((marks[1].start_s - 8.0).abs() < 1e-12);
    }

    #[test]
    fn some_codes() {
        // ITU-R M.1677-1 table.
        assert_eq!(code('a'), Some(".-"));
        assert_eq!(code('Q'), Some("--.-"));
        assert_eq!(code('0'), Some("-----"));
        assert_eq!(code('/'), Some("-..-."));
        assert_eq!(code('?'), Some("..--.."));
        assert_eq!(code('='), Some("-...-"));
        assert_eq!(code('#'), None);
        assert!(encode("A#").is_err());
        assert!(encode("   ").is_err());
    }

    #[test]
    fn weighting_keeps_dit_plus_space() {
        // Definition above: dit + element space = 2 units for any mark/space ratio.
        let t = Timing::new(0.06, 3.3, 1.5);
        assert!((t.dit_s + t.element_space_s - 0.12).abs() < 1e-15);
        assert!((t.dit_s / t.element_space_s - 1.5).abs() < 1e-12);
        assert!((t.dah_s / t.dit_s - 3.3).abs() < 1e-12);
    }
}
