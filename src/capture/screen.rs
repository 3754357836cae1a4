//! The `watch` display: draws a snapshot; measures nothing. Layout, top to
//! bottom: a status line (tone, counts, input health, LIVE or HELD), the
//! input level, the last element beside the running figures of the window
//! with each figure's verdict, a waterfall of the spectrum around the pitch
//! (newest row on top), and the keys.

use std::collections::VecDeque;

use ratatui::layout::{Constraint, Layout, Rect};
use ratatui::style::{Color, Modifier, Style};
use ratatui::text::{Line, Span};
use ratatui::widgets::{Block, Paragraph};
use ratatui::Frame;

use super::engine::Snapshot;
use crate::analysis::live::{LiveView, Phase};
use crate::dsp::stats::Spread;
use crate::judge::{self, Status, Verdict};

/// What the display itself keeps between snapshots.
#[derive(Clone, Debug, Default)]
pub struct UiState {
    /// Device and stream, as shown in the title.
    pub source: String,
    pub frozen: bool,
    /// Spectrum rows, newest first.
    pub waterfall: VecDeque<Vec<f32>>,
    pub save: Option<String>,
    /// The sound card's latest passing error (an overrun, say).
    pub notice: Option<String>,
}

/// Rows kept for the waterfall.
pub const WATERFALL_ROWS: usize = 64;

impl UiState {
    pub fn add_row(&mut self, db: &[f32]) {
        self.waterfall.push_front(db.to_vec());
        self.waterfall.truncate(WATERFALL_ROWS);
    }
}

/// Characters for spectrum levels, weakest to strongest, and the range
/// they cover (dB relative to a full-scale sine).
const RAMP: &[char] = &[' ', '.', ':', '-', '=', '+', '*', '#', '%', '@'];
const FLOOR_DB: f32 = -100.0;
const TOP_DB: f32 = -10.0;

/// One waterfall row as text, resampled to `width` columns.
pub fn shade_row(db: &[f32], width: usize) -> String {
    (0..width)
        .map(|i| {
            if db.is_empty() {
                return ' ';
            }
            let a = i * db.len() / width;
            let b = ((i + 1) * db.len() / width).max(a + 1).min(db.len());
            let v = db[a..b].iter().copied().fold(f32::MIN, f32::max);
            let x = ((v - FLOOR_DB) / (TOP_DB - FLOOR_DB)).clamp(0.0, 1.0);
            RAMP[((x * (RAMP.len() - 1) as f32).round()) as usize]
        })
        .collect()
}

fn status_style(s: Status) -> Style {
    match s {
        Status::Pass => Style::default().fg(Color::Green),
        Status::Warn => Style::default().fg(Color::Yellow),
        Status::Fail => Style::default().fg(Color::Red).add_modifier(Modifier::BOLD),
        Status::NotMeasured => Style::default().fg(Color::DarkGray),
    }
}

/// The limit of a verdict in a few characters.
fn limit_text(v: &Verdict) -> String {
    let f = |x: f64| {
        let s = format!("{x:.1}");
        s.trim_end_matches(".0").to_string()
    };
    match (v.min, v.max) {
        (Some(a), Some(b)) => format!("{}-{}", f(a), f(b)),
        (Some(a), None) => format!(">= {}", f(a)),
        (None, Some(b)) => format!("<= {}", f(b)),
        (None, None) => match (v.warn_min, v.warn_max) {
            (Some(a), Some(b)) => format!("{}-{}", f(a), f(b)),
            (Some(a), None) => format!(">= {}", f(a)),
            (None, Some(b)) => format!("<= {}", f(b)),
            _ => String::new(),
        },
    }
}

fn opt(v: Option<f64>, d: usize) -> String {
    v.map_or("-".into(), |x| format!("{x:.d$}"))
}

/// One row of the running figures: name, median, p10-p90, limit, verdict.
fn figure_row<'a>(
    name: &str,
    unit: &str,
    spread: Option<Spread>,
    single: Option<f64>,
    d: usize,
    verdict: Option<&Verdict>,
) -> Line<'a> {
    let (med, range) = match (spread, single) {
        (Some(s), _) => (
            format!("{:.d$}", s.median),
            format!("{:.d$} to {:.d$}", s.p10, s.p90),
        ),
        (None, Some(x)) => (format!("{x:.d$}"), String::new()),
        _ => ("-".into(), String::new()),
    };
    let (lim, st) = match verdict {
        Some(v) => (limit_text(v), Some(v.status)),
        None => ("no limit".into(), None),
    };
    let mut spans = vec![Span::raw(format!(
        "{:<16}{:>9} {:<5}{:>18}  {:<10}",
        name, med, unit, range, lim
    ))];
    if let Some(s) = st {
        spans.push(Span::styled(s.as_str().to_uppercase(), status_style(s)));
    }
    Line::from(spans)
}

fn find<'a>(vs: &'a [Verdict], metric: &str) -> Option<&'a Verdict> {
    vs.iter().find(|v| v.metric == metric)
}

fn phase_text(v: &LiveView) -> String {
    match &v.phase {
        Phase::Listening { heard_s, initial_s } => {
            format!("listening for a keyed tone ({heard_s:.1} of {initial_s:.1} s)")
        }
        Phase::NoTone { heard_s, initial_s } => format!(
            "no keyed tone in the last stretch; listening again ({heard_s:.1} of {initial_s:.1} s)"
        ),
        Phase::Tracking { tone_hz, channel } => {
            format!("tone {tone_hz:.1} Hz on channel {channel}")
        }
    }
}

fn clock(s: f64) -> String {
    format!("{}:{:04.1}", (s / 60.0) as u64, s % 60.0)
}

/// Draws one frame.
pub fn draw(f: &mut Frame, snap: &Snapshot, ui: &UiState) {
    let v = &snap.view;
    let [head, level, mid, water, keys] = Layout::vertical([
        Constraint::Length(3),
        Constraint::Length(1),
        Constraint::Length(12),
        Constraint::Min(3),
        Constraint::Length(1),
    ])
    .areas(f.area());

    // Status.
    let mode = if ui.frozen {
        Span::styled(
            " HELD ",
            Style::default().fg(Color::Black).bg(Color::Yellow),
        )
    } else {
        Span::styled(" LIVE ", Style::default().fg(Color::Black).bg(Color::Green))
    };
    let mut status = vec![
        Span::raw(format!(
            "{}   elements {}   stream {}",
            phase_text(v),
            v.count,
            clock(v.stream_s)
        )),
        Span::raw(format!("   dropped buffers {}", snap.dropped_buffers)),
    ];
    if let Some(p) = &ui.save {
        status.push(Span::raw(format!("   saving {p}")));
    }
    if let Some(e) = &ui.notice {
        status.push(Span::styled(
            format!("   sound card: {e}"),
            Style::default().fg(Color::Yellow),
        ));
    }
    f.render_widget(
        Paragraph::new(Line::from(status)).block(Block::bordered().title(Line::from(vec![
            Span::raw(format!(" cwaudit watch: {} ", ui.source)),
            mode,
        ]))),
        head,
    );

    // Input level.
    let db = v.peak_dbfs;
    let w = level.width.saturating_sub(40) as usize;
    let fill = (((db + 60.0) / 60.0).clamp(0.0, 1.0) * w as f64).round() as usize;
    let mut lv = vec![
        Span::raw(format!(" peak {:>6.1} dBFS ", db.max(-99.9))),
        Span::styled(
            "#".repeat(fill),
            Style::default().fg(if db > -6.0 {
                Color::Yellow
            } else {
                Color::Cyan
            }),
        ),
        Span::raw(".".repeat(w - fill.min(w))),
    ];
    if v.clipped_samples > 0 {
        lv.push(Span::styled(
            format!(" CLIPPING {}", v.clipped_samples),
            Style::default().fg(Color::Red).add_modifier(Modifier::BOLD),
        ));
    }
    f.render_widget(Paragraph::new(Line::from(lv)), level);

    // Last element | running figures.
    let [left, right] =
        Layout::horizontal([Constraint::Length(30), Constraint::Min(40)]).areas(mid);
    let last: Vec<Line> = match &v.last {
        Some(e) => vec![
            Line::raw(format!("rise   {:>8} ms", opt(e.rise_ms, 2))),
            Line::raw(format!("fall   {:>8} ms", opt(e.fall_ms, 2))),
            Line::raw(format!("chirp  {:>8.1} Hz", e.chirp_hz)),
            Line::raw(format!("level  {:>8.1} dBFS", e.level_dbfs)),
            Line::raw(format!("pitch  {:>8.1} Hz", e.frequency_hz)),
            Line::raw(format!("length {:>8.1} ms", (e.end_s - e.start_s) * 1e3)),
            Line::raw(format!("at     {:>8}", clock(e.end_s))),
        ],
        None => vec![Line::raw("waiting for an element")],
    };
    let title = v.last.as_ref().map_or(" last element ".to_string(), |e| {
        format!(" element {} ", e.number)
    });
    f.render_widget(
        Paragraph::new(last).block(Block::bordered().title(title)),
        left,
    );

    let s = &v.summary;
    let vs = &snap.verdicts;
    let mut rows = vec![Line::styled(
        format!(
            "{:<16}{:>9} {:<5}{:>18}  {:<10}{}",
            "figure", "median", "", "p10 to p90", "limit", "verdict"
        ),
        Style::default().add_modifier(Modifier::UNDERLINED),
    )];
    rows.push(figure_row(
        "rise",
        "ms",
        s.rise_ms,
        None,
        2,
        find(vs, "rise_ms"),
    ));
    rows.push(figure_row(
        "fall",
        "ms",
        s.fall_ms,
        None,
        2,
        find(vs, "fall_ms"),
    ));
    rows.push(figure_row(
        "chirp",
        "Hz",
        s.chirp_hz,
        None,
        1,
        find(vs, "chirp_hz"),
    ));
    rows.push(figure_row(
        "chirp, mean el.",
        "Hz",
        None,
        s.chirp_mean_element_hz,
        1,
        find(vs, "chirp_mean_element_hz"),
    ));
    rows.push(figure_row(
        "level",
        "dBFS",
        v.level_dbfs,
        None,
        1,
        find(vs, "level_dbfs"),
    ));
    rows.push(figure_row(
        "pitch",
        "Hz",
        None,
        s.tone_hz,
        1,
        find(vs, "tone_hz"),
    ));
    rows.push(figure_row("speed", "WPM", None, s.wpm, 1, find(vs, "wpm")));
    rows.push(figure_row(
        "SNR",
        "dB",
        None,
        s.snr_db,
        1,
        find(vs, "snr_db"),
    ));
    let shown = [
        "rise_ms",
        "fall_ms",
        "chirp_hz",
        "chirp_mean_element_hz",
        "level_dbfs",
        "tone_hz",
        "wpm",
        "snr_db",
    ];
    let judged: Vec<&Verdict> = vs
        .iter()
        .filter(|x| x.status != Status::NotMeasured)
        .collect();
    let overall = judge::overall(vs);
    let others = judged
        .iter()
        .filter(|x| !shown.contains(&x.metric.as_str()))
        .count();
    let mut foot = vec![Span::raw(format!(
        "over the last {} elements: ",
        v.window_len
    ))];
    if judged.is_empty() {
        foot.push(Span::raw("nothing judged yet"));
    } else {
        foot.push(Span::styled(
            overall.as_str().to_uppercase(),
            status_style(overall),
        ));
    }
    if others > 0 {
        foot.push(Span::raw(format!(" ({others} more figures judged)")));
    }
    rows.push(Line::from(foot));
    f.render_widget(
        Paragraph::new(rows)
            .block(Block::bordered().title(format!(" last {} elements ", v.window_len))),
        right,
    );

    // Waterfall.
    let sp = &v.spectrum;
    let inner = Rect {
        x: water.x + 1,
        y: water.y + 1,
        width: water.width.saturating_sub(2),
        height: water.height.saturating_sub(2),
    };
    let lines: Vec<Line> = ui
        .waterfall
        .iter()
        .take(inner.height as usize)
        .map(|r| Line::raw(shade_row(r, inner.width as usize)))
        .collect();
    f.render_widget(
        Paragraph::new(lines).block(Block::bordered().title(format!(
            " spectrum {:.0} to {:.0} Hz, newest on top; \"{}\" = {:.0} to {:.0} dBFS ",
            sp.lo_hz,
            sp.hi_hz,
            RAMP.iter().collect::<String>(),
            FLOOR_DB,
            TOP_DB
        ))),
        water,
    );

    f.render_widget(
        Paragraph::new(Line::from(vec![
            Span::styled(" r", Style::default().add_modifier(Modifier::BOLD)),
            Span::raw(" reset figures   "),
            Span::styled("f", Style::default().add_modifier(Modifier::BOLD)),
            Span::raw(if ui.frozen {
                " resume display   "
            } else {
                " hold display   "
            }),
            Span::styled("q", Style::default().add_modifier(Modifier::BOLD)),
            Span::raw(" quit"),
        ])),
        keys,
    );
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::live::{LiveAnalyzer, LiveConfig};
    use crate::judge::Profile;
    use crate::synth::{self, SynthSpec};
    use ratatui::backend::TestBackend;
    use ratatui::Terminal;

    fn snapshot(rise_ms: f64) -> Snapshot {
        let spec = SynthSpec {
            text: "PARIS PARIS PARIS".into(),
            rise_ms,
            fall_ms: 5.0,
            snr_db: Some(35.0),
            ..Default::default()
        };
        let (x, _) = synth::render(&spec).unwrap();
        let mut a = LiveAnalyzer::new(48_000, 1, LiveConfig::default()).unwrap();
        a.push(&x);
        let view = a.view();
        let verdicts = judge::judge(&view.summary, &Profile::defaults());
        Snapshot {
            view,
            verdicts,
            dropped_buffers: 3,
            made: std::time::Instant::now(),
        }
    }

    fn render(s: &Snapshot, ui: &UiState) -> (Vec<String>, ratatui::buffer::Buffer) {
        let mut t = Terminal::new(TestBackend::new(120, 40)).unwrap();
        t.draw(|f| draw(f, s, ui)).unwrap();
        let b = t.backend().buffer().clone();
        let lines = (0..b.area.height)
            .map(|y| {
                (0..b.area.width)
                    .map(|x| b[(x, y)].symbol())
                    .collect::<String>()
            })
            .collect();
        (lines, b)
    }

    #[test]
    fn the_screen_shows_the_figures_their_verdicts_and_the_mode() {
        // Synthesizer truth: 5 ms raised-cosine edges, 700 Hz, 20 WPM. The
        // built-in limits pass 2-12 ms edges.
        let s = snapshot(5.0);
        let mut ui = UiState {
            source: "test (48000 Hz, 1 ch, s16)".into(),
            ..Default::default()
        };
        let (lines, _) = render(&s, &ui);
        let all = lines.join("\n");
        let row = lines.iter().find(|l| l.contains("││rise")).expect(&all);
        let med: f64 = row
            .split("││rise")
            .nth(1)
            .unwrap()
            .split_whitespace()
            .next()
            .unwrap()
            .parse()
            .unwrap();
        assert!((med - 5.0).abs() < 0.3, "{row}");
        assert!(row.contains("2-12") && row.contains("PASS"), "{row}");
        assert!(
            all.contains(" LIVE ") && all.contains("dropped buffers 3"),
            "{all}"
        );
        assert!(
            all.contains(&format!("elements {} ", s.view.count)),
            "{all}"
        );
        assert!(all.contains("speed") && all.contains("20.0 WPM"), "{all}");
        // The waterfall: a row of 60 columns, -100 dBFS but -10 dBFS in
        // column 30, drawn 118 wide: '@' at 30/60 of the width, blanks
        // elsewhere; the newest row on top.
        let mut db = vec![-100.0f32; 60];
        db[30] = -10.0;
        ui.add_row(&db);
        let (lines, _) = render(&s, &ui);
        let wrow = lines.iter().position(|l| l.contains(" spectrum ")).unwrap() + 1;
        let w: Vec<char> = lines[wrow].chars().collect();
        let at: Vec<usize> = (0..w.len()).filter(|&i| w[i] == '@').collect();
        assert_eq!(at, vec![1 + 59, 1 + 60], "{}", lines[wrow]);
        assert!(w[1..59].iter().all(|c| *c == ' '));
        ui.frozen = true;
        let (lines, _) = render(&s, &ui);
        assert!(lines.join("\n").contains(" HELD "));
    }

    #[test]
    fn a_failing_figure_is_shown_as_fail_in_red() {
        // 1 ms edges: below the built-in 2 ms minimum.
        let s = snapshot(1.0);
        let (lines, b) = render(&s, &UiState::default());
        let y = lines.iter().position(|l| l.contains("││rise")).unwrap();
        let x = lines[y].find("FAIL").expect(&lines[y]);
        // Columns count characters; the box lines are one cell each.
        let col = lines[y][..x].chars().count() as u16;
        assert_eq!(b[(col, y as u16)].fg, Color::Red);
    }
}
