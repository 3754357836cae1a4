//! Pictures of a report: spectrogram, averaged spectrum, overlaid edges,
//! chirp traces and envelope, as PNG or SVG (plotters).
//!
//! Everything drawn comes from the report (`report.views`, the elements and
//! the summary); the only arithmetic here is for drawing: the median curve
//! of the overlaid lines, decimation and axis ranges. Every picture copes
//! with missing data by drawing its frame with a note instead.
//!
//! Text needs a TrueType font, loaded once at run time from the usual
//! Debian and Fedora places (DejaVu Sans, then Liberation Sans). Without one
//! the pictures are drawn without any text rather than failing.

use std::path::{Path, PathBuf};
use std::sync::OnceLock;

use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};
use serde_json::Value;

use crate::analysis::report::{Kind, Report, Summary};
use crate::analysis::views::{EdgesView, SpectrogramView, SpectrumView, Views};
use crate::error::{CwError, Result};
use crate::fsutil::write_atomic;

/// Size of every picture, pixels (SVG: user units).
pub const WIDTH_PX: u32 = 960;
pub const HEIGHT_PX: u32 = 480;

/// At most this many element lines are drawn in one overlay; beyond it an
/// evenly spaced selection is drawn (the median still uses every element).
pub const MAX_LINES: usize = 300;
/// At most this many points per drawn line.
const MAX_LINE_POINTS: usize = 240;
/// At most this many columns on the common grid of the chirp median.
const MAX_MEDIAN_POINTS: usize = 400;

// The palette: Okabe and Ito's eight colours, which stay distinct for the
// common colour-vision deficiencies, on a warm paper background.
const PAPER: RGBColor = RGBColor(252, 251, 247);
const INK: RGBColor = RGBColor(40, 44, 54);
const GRID: RGBColor = RGBColor(222, 221, 214);
const MUTED: RGBColor = RGBColor(120, 122, 128);
const ORANGE: RGBColor = RGBColor(230, 159, 0);
const SKY: RGBColor = RGBColor(86, 180, 233);
const GREEN: RGBColor = RGBColor(0, 158, 115);
const YELLOW: RGBColor = RGBColor(240, 228, 66);
const BLUE: RGBColor = RGBColor(0, 114, 178);
const VERMILLION: RGBColor = RGBColor(213, 94, 0);
const PURPLE: RGBColor = RGBColor(204, 121, 167);

/// Font family the pictures use; registered from a font file at run time.
const FAMILY: &str = "sans-serif";
/// A family that is never registered: used when text is off, so that any
/// text drawn by mistake fails loudly in the tests instead of silently.
const NO_FAMILY: &str = "cwaudit-no-font";

const FONT_FILES: &[&str] = &[
    "/usr/share/fonts/truetype/dejavu/DejaVuSans.ttf",
    "/usr/share/fonts/dejavu/DejaVuSans.ttf",
    "/usr/share/fonts/TTF/DejaVuSans.ttf",
    "/usr/share/fonts/dejavu-sans-fonts/DejaVuSans.ttf",
    "/usr/share/fonts/truetype/liberation/LiberationSans-Regular.ttf",
    "/usr/share/fonts/liberation-sans/LiberationSans-Regular.ttf",
];

/// Loads a font once; true when text can be drawn.
pub fn fonts_available() -> bool {
    static OK: OnceLock<bool> = OnceLock::new();
    *OK.get_or_init(|| {
        for f in FONT_FILES {
            if let Ok(bytes) = std::fs::read(f) {
                // Leaked once per process: plotters keeps fonts for 'static.
                let bytes: &'static [u8] = Box::leak(bytes.into_boxed_slice());
                if plotters::style::register_font(FAMILY, FontStyle::Normal, bytes).is_ok() {
                    return true;
                }
            }
        }
        false
    })
}

/// A user's spectrum mask: (offset Hz, dBc) points, offsets not decreasing.
#[derive(Clone, Debug, PartialEq)]
pub struct Mask {
    pub path: PathBuf,
    pub points: Vec<(f64, f64)>,
}

impl Mask {
    /// Reads a mask file: one "offset_hz dbc" pair per line, `#` starts a comment.
    pub fn load(path: &Path) -> Result<Mask> {
        let text = std::fs::read_to_string(path)
            .map_err(|e| CwError::input(path, format!("cannot be read as a mask file ({e})")))?;
        Mask::parse(&text, path)
    }

    /// Parses mask text; `path` names the file in errors.
    pub fn parse(text: &str, path: &Path) -> Result<Mask> {
        let mut points = Vec::new();
        for (i, raw) in text.lines().enumerate() {
            let line = raw.split('#').next().unwrap_or("").trim();
            if line.is_empty() {
                continue;
            }
            let n = i + 1;
            let fields: Vec<&str> = line
                .split(|c: char| c.is_whitespace() || c == ',' || c == ';')
                .filter(|s| !s.is_empty())
                .collect();
            let nums: Vec<f64> = fields
                .iter()
                .filter_map(|s| s.parse::<f64>().ok())
                .collect();
            if fields.len() != 2 || nums.len() != 2 {
                return Err(CwError::input(
                    path,
                    format!(
                        "line {n}: expected two numbers, an offset from the pitch in Hz and a level in dBc, but found \"{line}\""
                    ),
                ));
            }
            let (f, l) = (nums[0], nums[1]);
            if !f.is_finite() || !l.is_finite() || f.abs() > 1e6 || l.abs() > 1e3 {
                return Err(CwError::input(
                    path,
                    format!("line {n}: \"{line}\" is out of range (offset within ±1 MHz, level within ±1000 dBc)"),
                ));
            }
            if let Some(&(pf, _)) = points.last() {
                if f < pf {
                    return Err(CwError::input(
                        path,
                        format!("line {n}: offset {f} Hz is below the previous point's {pf} Hz; list the points from low to high offset"),
                    ));
                }
            }
            points.push((f, l));
        }
        if points.len() < 2 {
            return Err(CwError::input(
                path,
                "has fewer than two mask points; give one \"offset_hz dbc\" pair per line",
            ));
        }
        Ok(Mask {
            path: path.to_path_buf(),
            points,
        })
    }
}

/// The spectral figures of the summary that the spectrum picture marks.
///
/// Read by field name from the serialized summary, so each mark is drawn
/// when its figure is present and silently left out when it is not.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct SpectralMarks {
    pub rbw_hz: Option<f64>,
    pub occupied_bandwidth_hz: Option<f64>,
    /// Offsets of the 0.5 % and 99.5 % power points from the pitch, Hz.
    pub occupied_edges_hz: Option<[f64; 2]>,
    /// (x, [lower, upper] offsets, Hz) for each x-dB bandwidth present.
    pub x_db_edges_hz: Vec<(f64, [f64; 2])>,
    pub noise_floor_dbc: Option<f64>,
    pub necessary_bandwidth_hz: Option<f64>,
    /// Receiver passband, absolute audio Hz.
    pub passband_hz: Option<[f64; 2]>,
    pub tone_hz: Option<f64>,
}

fn pair(v: Option<&Value>) -> Option<[f64; 2]> {
    let a = v?.as_array()?;
    if a.len() != 2 {
        return None;
    }
    let p = [a[0].as_f64()?, a[1].as_f64()?];
    (p[0].is_finite() && p[1].is_finite()).then_some(p)
}

impl SpectralMarks {
    pub fn from_summary(s: &Summary) -> SpectralMarks {
        let v = serde_json::to_value(s).unwrap_or(Value::Null);
        let num = |k: &str| {
            v.get(k)
                .and_then(Value::as_f64)
                .filter(|x: &f64| x.is_finite())
        };
        let mut x_db_edges_hz: Vec<(f64, [f64; 2])> = v
            .get("bandwidth_edges_hz")
            .and_then(Value::as_object)
            .map(|m| {
                m.iter()
                    .filter_map(|(k, e)| Some((k.parse::<f64>().ok()?, pair(Some(e))?)))
                    .collect()
            })
            .unwrap_or_default();
        x_db_edges_hz.sort_by(|a, b| a.0.total_cmp(&b.0));
        SpectralMarks {
            rbw_hz: num("rbw_hz"),
            occupied_bandwidth_hz: num("occupied_bandwidth_hz"),
            occupied_edges_hz: pair(v.get("occupied_edges_hz")),
            x_db_edges_hz,
            noise_floor_dbc: num("noise_floor_dbc"),
            necessary_bandwidth_hz: num("necessary_bandwidth_hz"),
            passband_hz: pair(v.get("passband_hz")),
            tone_hz: s.tone_hz,
        }
    }
}

/// One picture: file stem, title, and what it shows (for captions).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Picture {
    Spectrogram,
    Spectrum,
    Edges,
    Chirp,
    Envelope,
}

impl Picture {
    pub const ALL: [Picture; 5] = [
        Picture::Spectrogram,
        Picture::Spectrum,
        Picture::Edges,
        Picture::Chirp,
        Picture::Envelope,
    ];
    pub fn stem(self) -> &'static str {
        match self {
            Picture::Spectrogram => "spectrogram",
            Picture::Spectrum => "spectrum",
            Picture::Edges => "edges",
            Picture::Chirp => "chirp",
            Picture::Envelope => "envelope",
        }
    }
    pub fn title(self) -> &'static str {
        match self {
            Picture::Spectrogram => "Spectrogram of the recording",
            Picture::Spectrum => "Averaged spectrum of the keyed passage",
            Picture::Edges => "Rising and falling edges, overlaid",
            Picture::Chirp => "Frequency during each element",
            Picture::Envelope => "Envelope over time",
        }
    }
}

/// Draws every picture into `dir` as `spectrogram.png`, `spectrum.png`,
/// `edges.png`, `chirp.png`, `envelope.png` (`.svg` with `svg`). Creates
/// `dir` if needed; refuses to replace any existing file unless
/// `overwrite`, and then writes none of them.
pub fn write_plots(
    report: &Report,
    dir: &Path,
    svg: bool,
    mask: Option<&Mask>,
    overwrite: bool,
) -> Result<Vec<PathBuf>> {
    let ext = if svg { "svg" } else { "png" };
    let paths: Vec<PathBuf> = Picture::ALL
        .iter()
        .map(|p| dir.join(format!("{}.{ext}", p.stem())))
        .collect();
    if !overwrite {
        if let Some(p) = paths.iter().find(|p| p.exists()) {
            return Err(CwError::output(
                p,
                "already exists; pass --force to replace it",
            ));
        }
    }
    if dir.exists() && !dir.is_dir() {
        return Err(CwError::output(
            dir,
            "is not a folder; --plots needs a folder for the pictures",
        ));
    }
    std::fs::create_dir_all(dir)
        .map_err(|e| CwError::output(dir, format!("cannot be created ({e})")))?;
    let text = fonts_available();
    for (pic, path) in Picture::ALL.iter().zip(&paths) {
        let bytes = if svg {
            render_svg(*pic, report, mask, text)
                .map_err(|e| draw_error(path, e))?
                .into_bytes()
        } else {
            render_png(*pic, report, mask, text, (WIDTH_PX, HEIGHT_PX))
                .map_err(|e| draw_error(path, e))?
        };
        write_atomic(path, &bytes, overwrite)?;
    }
    Ok(paths)
}

fn draw_error(path: &Path, e: String) -> CwError {
    CwError::output(path, format!("could not be drawn ({e})"))
}

/// Every picture as an SVG document, with its title, for the HTML report.
pub fn svg_strings(report: &Report, mask: Option<&Mask>) -> Vec<(String, String)> {
    let text = fonts_available();
    Picture::ALL
        .iter()
        .filter_map(|p| {
            render_svg(*p, report, mask, text)
                .ok()
                .map(|s| (p.title().to_string(), s))
        })
        .collect()
}

/// One picture as SVG text. `text` false (or no font found) draws no text at all.
pub fn render_svg(
    pic: Picture,
    report: &Report,
    mask: Option<&Mask>,
    text: bool,
) -> std::result::Result<String, String> {
    let mut s = String::new();
    {
        let root = SVGBackend::with_string(&mut s, (WIDTH_PX, HEIGHT_PX)).into_drawing_area();
        let text = text && fonts_available();
        draw(pic, &root, report, mask, Look { text }).map_err(|e| e.to_string())?;
        root.present().map_err(|e| e.to_string())?;
    }
    // plotters labels embedded bitmaps "data:png"; browsers want the full
    // media type to show them.
    Ok(s.replace("href=\"data:png;base64,", "href=\"data:image/png;base64,"))
}

/// One picture as PNG bytes of `size` pixels.
pub fn render_png(
    pic: Picture,
    report: &Report,
    mask: Option<&Mask>,
    text: bool,
    size: (u32, u32),
) -> std::result::Result<Vec<u8>, String> {
    let mut buf = vec![0u8; size.0 as usize * size.1 as usize * 3];
    {
        let root = BitMapBackend::with_buffer(&mut buf, size).into_drawing_area();
        let text = text && fonts_available();
        draw(pic, &root, report, mask, Look { text }).map_err(|e| e.to_string())?;
        root.present().map_err(|e| e.to_string())?;
    }
    encode_png(&buf, size)
}

fn encode_png(rgb: &[u8], (w, h): (u32, u32)) -> std::result::Result<Vec<u8>, String> {
    use image::ImageEncoder;
    let mut out = Vec::new();
    image::codecs::png::PngEncoder::new(&mut out)
        .write_image(rgb, w, h, image::ColorType::Rgb8)
        .map_err(|e| e.to_string())?;
    Ok(out)
}

type DrawResult<DB> =
    std::result::Result<(), DrawingAreaErrorKind<<DB as DrawingBackend>::ErrorType>>;

#[derive(Clone, Copy)]
struct Look {
    text: bool,
}

impl Look {
    fn font(&self, size: f64) -> TextStyle<'static> {
        let family = if self.text { FAMILY } else { NO_FAMILY };
        (family, size).into_font().color(&INK)
    }
    fn muted(&self, size: f64) -> TextStyle<'static> {
        self.font(size).color(&MUTED)
    }
}

fn draw<DB: DrawingBackend>(
    pic: Picture,
    root: &DrawingArea<DB, Shift>,
    report: &Report,
    mask: Option<&Mask>,
    look: Look,
) -> DrawResult<DB> {
    root.fill(&PAPER)?;
    // A thin band along the top edge: our own frame for every picture.
    let (w, _) = root.dim_in_pixel();
    root.draw(&Rectangle::new(
        [(0, 0), (w as i32, 4)],
        BLUE.mix(0.85).filled(),
    ))?;
    let (head, body) = root.split_vertically(34);
    if look.text {
        head.draw(&Text::new(
            pic.title(),
            (14, 12),
            look.font(17.0).pos(Pos::new(HPos::Left, VPos::Top)),
        ))?;
        let name = Path::new(&report.input.path)
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        head.draw(&Text::new(
            name,
            (w as i32 - 14, 14),
            look.muted(12.0).pos(Pos::new(HPos::Right, VPos::Top)),
        ))?;
    }
    let views = &report.views;
    match pic {
        Picture::Spectrogram => draw_spectrogram(&body, &views.spectrogram, report, look),
        Picture::Spectrum => draw_spectrum(&body, views, report, mask, look),
        Picture::Edges => draw_edges(&body, &views.edges, report, look),
        Picture::Chirp => draw_chirp(&body, report, look),
        Picture::Envelope => draw_envelope(&body, views, report, look),
    }
}

/// An empty frame with a note in the middle, for a picture without data.
fn empty_frame<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    note: &str,
    look: Look,
) -> DrawResult<DB> {
    let (w, h) = area.dim_in_pixel();
    area.draw(&Rectangle::new(
        [(60, 10), (w as i32 - 20, h as i32 - 40)],
        ShapeStyle::from(&GRID).stroke_width(1),
    ))?;
    if look.text {
        area.draw(&Text::new(
            note.to_string(),
            (w as i32 / 2, h as i32 / 2 - 15),
            look.muted(15.0).pos(Pos::new(HPos::Center, VPos::Center)),
        ))?;
    }
    Ok(())
}

type Chart<'a, DB> = ChartContext<
    'a,
    DB,
    Cartesian2d<plotters::coord::types::RangedCoordf64, plotters::coord::types::RangedCoordf64>,
>;

/// Builds a chart with our mesh: labelled axes with units, light grid.
#[allow(clippy::too_many_arguments)]
fn chart<'a, DB: DrawingBackend>(
    area: &'a DrawingArea<DB, Shift>,
    x: std::ops::Range<f64>,
    y: std::ops::Range<f64>,
    x_desc: &str,
    y_desc: &str,
    look: Look,
    x_fmt: &dyn Fn(&f64) -> String,
    y_fmt: &dyn Fn(&f64) -> String,
) -> std::result::Result<Chart<'a, DB>, DrawingAreaErrorKind<DB::ErrorType>> {
    let mut c = ChartBuilder::on(area)
        .margin_left(8)
        .margin_right(22)
        .margin_top(6)
        .margin_bottom(6)
        .x_label_area_size(if look.text { 44 } else { 8 })
        .y_label_area_size(if look.text { 64 } else { 8 })
        .build_cartesian_2d(x, y)?;
    let mut mesh = c.configure_mesh();
    mesh.axis_style(ShapeStyle::from(&INK).stroke_width(1))
        .bold_line_style(ShapeStyle::from(&GRID).stroke_width(1))
        .light_line_style(ShapeStyle::from(&GRID.mix(0.35)).stroke_width(1));
    if look.text {
        mesh.x_desc(x_desc)
            .y_desc(y_desc)
            .label_style(look.font(12.0))
            .axis_desc_style(look.font(13.0))
            .x_labels(10)
            .y_labels(8)
            .x_label_formatter(x_fmt)
            .y_label_formatter(y_fmt);
    } else {
        mesh.x_labels(0).y_labels(0);
    }
    mesh.draw()?;
    Ok(c)
}

fn fmt0(v: &f64) -> String {
    format!("{v:.0}")
}

/// Axis number with as few decimals as the tick spacing needs.
fn fmt_auto(v: &f64) -> String {
    let a = v.abs();
    if a == 0.0 || a >= 10.0 {
        format!("{v:.0}")
    } else if a >= 1.0 {
        format!("{v:.1}")
    } else {
        format!("{v:.2}")
    }
}

/// Evenly spaced indices, at most `max` of `n`.
fn pick(n: usize, max: usize) -> Vec<usize> {
    if n <= max {
        return (0..n).collect();
    }
    (0..max).map(|i| i * n / max).collect()
}

fn finite_range(vals: impl Iterator<Item = f64>) -> Option<(f64, f64)> {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for v in vals.filter(|v| v.is_finite()) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    (lo <= hi).then_some((lo, hi))
}

fn median(v: &mut [f64]) -> f64 {
    v.sort_by(|a, b| a.total_cmp(b));
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

/// A perceptually ordered colour scale (dark blue-violet to yellow, after
/// the viridis scale), readable without colour vision and in grey print.
fn scale_colour(t: f64) -> [u8; 3] {
    const STOPS: [[f64; 3]; 9] = [
        [68.0, 1.0, 84.0],
        [71.0, 44.0, 122.0],
        [59.0, 81.0, 139.0],
        [44.0, 113.0, 142.0],
        [33.0, 144.0, 141.0],
        [39.0, 173.0, 129.0],
        [92.0, 200.0, 99.0],
        [170.0, 220.0, 50.0],
        [253.0, 231.0, 37.0],
    ];
    let t = if t.is_finite() {
        t.clamp(0.0, 1.0)
    } else {
        0.0
    };
    let x = t * (STOPS.len() - 1) as f64;
    let i = (x.floor() as usize).min(STOPS.len() - 2);
    let f = x - i as f64;
    let mut out = [0u8; 3];
    for (k, o) in out.iter_mut().enumerate() {
        *o = (STOPS[i][k] + f * (STOPS[i + 1][k] - STOPS[i][k])).round() as u8;
    }
    out
}

fn spectrogram_ok(s: &SpectrogramView) -> bool {
    s.rows > 0
        && s.cols > 0
        && s.dbc.len() == s.rows * s.cols
        && s.dt_s.is_finite()
        && s.dt_s > 0.0
        && s.df_hz.is_finite()
        && s.df_hz > 0.0
}

fn draw_spectrogram<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    s: &SpectrogramView,
    report: &Report,
    look: Look,
) -> DrawResult<DB> {
    if !spectrogram_ok(s) {
        return empty_frame(area, "No spectrogram in this report.", look);
    }
    let t0 = s.t0_s;
    let t1 = s.t0_s + s.dt_s * s.cols as f64;
    let f0 = s.f0_hz;
    let f1 = s.f0_hz + s.df_hz * s.rows as f64;
    // Colour range: from a robust low value (2nd percentile, or 6 dB under
    // the noise floor when the report has one) up to the carrier line.
    let marks = SpectralMarks::from_summary(&report.summary);
    let mut sample: Vec<f64> = s
        .dbc
        .iter()
        .step_by((s.dbc.len() / 20_000).max(1))
        .map(|&v| v as f64)
        .filter(|v| v.is_finite())
        .collect();
    sample.sort_by(|a, b| a.total_cmp(b));
    let top = 0.0;
    let low = marks
        .noise_floor_dbc
        .map(|n| n - 6.0)
        .or_else(|| sample.get(sample.len() / 50).copied())
        .unwrap_or(-80.0)
        .clamp(-140.0, top - 10.0);

    let (w, _) = area.dim_in_pixel();
    let bar_w = if look.text { 92 } else { 40 };
    let (main, bar) = area.split_horizontally(w.saturating_sub(bar_w) as i32);
    let (strip_area, spec_area) = main.split_vertically(26);

    let mut c = chart(
        &spec_area,
        t0..t1,
        f0..f1,
        "Time (s)",
        "Audio frequency (Hz)",
        look,
        &fmt_auto,
        &fmt0,
    )?;
    // The cells as one image at the plotting area's own resolution.
    let (xr, yr) = c.plotting_area().get_pixel_range();
    let pw = (xr.end - xr.start).max(1) as u32;
    let ph = (yr.end - yr.start).max(1) as u32;
    let mut img = vec![0u8; pw as usize * ph as usize * 3];
    for py in 0..ph as usize {
        // Row 0 of the picture is the top: the highest frequency.
        let row = ((ph as usize - 1 - py) * s.rows / ph as usize).min(s.rows - 1);
        for px in 0..pw as usize {
            let col = (px * s.cols / pw as usize).min(s.cols - 1);
            let v = s.dbc[row * s.cols + col] as f64;
            let rgb = scale_colour((v - low) / (top - low));
            let o = (py * pw as usize + px) * 3;
            img[o..o + 3].copy_from_slice(&rgb);
        }
    }
    if let Some(bm) = BitMapElement::with_owned_buffer((0, 0), (pw, ph), img) {
        c.plotting_area().strip_coord_spec().draw(&bm)?;
    }
    // Receiver passband edges, when estimated.
    if let Some([lo, hi]) = marks.passband_hz {
        for f in [lo, hi] {
            if f > f0 && f < f1 {
                c.draw_series(DashedLineSeries::new(
                    [(t0, f), (t1, f)],
                    6,
                    4,
                    ShapeStyle::from(&WHITE.mix(0.8)).stroke_width(1),
                ))?;
            }
        }
    }
    // Element boundaries: a key-down strip above the spectrogram, on the same
    // time axis, one block per element from its 50 % rise to its 50 % fall.
    let els: Vec<(f64, f64)> = report
        .elements
        .iter()
        .map(|e| (e.start_s, e.start_s + e.duration_s))
        .filter(|(a, b)| a.is_finite() && b.is_finite() && *b > t0 && *a < t1)
        .collect();
    let mut strip = ChartBuilder::on(&strip_area)
        .margin_left(8)
        .margin_right(22)
        .margin_top(6)
        .margin_bottom(2)
        .y_label_area_size(if look.text { 64 } else { 8 })
        .build_cartesian_2d(t0..t1, 0.0..1.0)?;
    strip.plotting_area().fill(&GRID.mix(0.5))?;
    strip
        .draw_series(els.iter().map(|&(a, b)| {
            Rectangle::new([(a.max(t0), 0.0), (b.min(t1), 1.0)], ORANGE.filled())
        }))?;
    if look.text {
        strip_area.draw(&Text::new(
            "key down",
            (8, 12),
            look.muted(11.0).pos(Pos::new(HPos::Left, VPos::Center)),
        ))?;
    }

    // Colour bar, dBc.
    let mut cb = ChartBuilder::on(&bar)
        .margin_top(32)
        .margin_bottom(50)
        .margin_right(if look.text { 50 } else { 10 })
        .margin_left(6)
        .right_y_label_area_size(0)
        .build_cartesian_2d(0.0..1.0, low..top)?;
    let steps = 120;
    cb.draw_series((0..steps).map(|i| {
        let a = low + (top - low) * i as f64 / steps as f64;
        let b = low + (top - low) * (i + 1) as f64 / steps as f64;
        let [r, g, bb] = scale_colour((i as f64 + 0.5) / steps as f64);
        Rectangle::new([(0.0, a), (1.0, b)], RGBColor(r, g, bb).filled())
    }))?;
    if look.text {
        let (bw, bh) = bar.dim_in_pixel();
        let (_, yr) = cb.plotting_area().get_pixel_range();
        let (bx, _) = cb.plotting_area().get_pixel_range();
        let x = bx.end + 6;
        let tick = if top - low > 60.0 { 20.0 } else { 10.0 };
        let mut v = (low / tick).ceil() * tick;
        while v <= top + 1e-9 {
            let y = yr.end - ((yr.end - yr.start) as f64 * (v - low) / (top - low)) as i32;
            bar.draw(&Text::new(
                format!("{v:.0}"),
                (x - bar.get_base_pixel().0, y - bar.get_base_pixel().1),
                look.font(11.0).pos(Pos::new(HPos::Left, VPos::Center)),
            ))?;
            v += tick;
        }
        bar.draw(&Text::new(
            "dBc",
            (bw as i32 / 2 - 16, bh as i32 - 30),
            look.font(12.0).pos(Pos::new(HPos::Center, VPos::Top)),
        ))?;
    }
    Ok(())
}

fn spectrum_points(s: &SpectrumView) -> Vec<(f64, f64)> {
    if !(s.step_hz.is_finite() && s.step_hz > 0.0 && s.first_offset_hz.is_finite()) {
        return vec![];
    }
    s.dbc
        .iter()
        .enumerate()
        .map(|(i, &v)| (s.first_offset_hz + s.step_hz * i as f64, v as f64))
        .filter(|p| p.1.is_finite())
        .collect()
}

fn draw_spectrum<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    views: &Views,
    report: &Report,
    mask: Option<&Mask>,
    look: Look,
) -> DrawResult<DB> {
    let sig = spectrum_points(&views.spectrum);
    let noise = spectrum_points(&views.noise);
    if sig.is_empty() {
        return empty_frame(area, "No spectrum in this report.", look);
    }
    let m = SpectralMarks::from_summary(&report.summary);
    let (d0, d1) = finite_range(sig.iter().map(|p| p.0)).unwrap_or((-1000.0, 1000.0));
    let (d0, d1) = if d1 > d0 {
        (d0, d1)
    } else {
        (d0 - 1.0, d1 + 1.0)
    };
    // Centre on the pitch, wide enough for three times the widest measured
    // point (the clicks live out there) and for the mask; never past the data.
    let widest = m
        .x_db_edges_hz
        .iter()
        .flat_map(|(_, e)| e.iter().copied())
        .chain(m.occupied_edges_hz.into_iter().flatten())
        .chain(m.necessary_bandwidth_hz.map(|b| b / 2.0))
        .map(f64::abs)
        .fold(0.0, f64::max);
    let mask_reach = mask
        .map(|mk| mk.points.iter().map(|p| p.0.abs()).fold(0.0, f64::max) * 1.1)
        .unwrap_or(0.0);
    let half = (3.0 * widest).max(mask_reach).max(400.0);
    let (x0, x1) = if widest > 0.0 || mask_reach > 0.0 {
        ((-half).max(d0), half.min(d1))
    } else {
        (d0, d1)
    };
    let sig: Vec<(f64, f64)> = sig.into_iter().filter(|p| p.0 >= x0 && p.0 <= x1).collect();
    let noise: Vec<(f64, f64)> = noise
        .into_iter()
        .filter(|p| p.0 >= x0 && p.0 <= x1)
        .collect();
    let (lo_data, _) = finite_range(sig.iter().chain(&noise).map(|p| p.1)).unwrap_or((-80.0, 0.0));
    let mut y0 = (lo_data - 5.0).max(-130.0);
    if let Some(mk) = mask {
        if let Some((lo, _)) = finite_range(mk.points.iter().map(|p| p.1)) {
            y0 = y0.min(lo - 5.0).max(-150.0);
        }
    }
    let y0 = (y0 / 10.0).floor() * 10.0;
    let y1 = 6.0;
    let clampy = |v: f64| v.clamp(y0, y1);
    let rbw = m
        .rbw_hz
        .or(Some(views.spectrum.rbw_hz).filter(|r| *r > 0.0));
    let y_desc = match rbw {
        Some(r) => format!("Level (dBc in {r:.1} Hz)"),
        None => "Level (dBc)".to_string(),
    };
    let mut c = chart(
        area,
        x0..x1,
        y0..y1,
        "Offset from the pitch (Hz)",
        &y_desc,
        look,
        &fmt0,
        &fmt0,
    )?;
    // Necessary bandwidth: a pale band centred on the pitch.
    if let Some(bn) = m.necessary_bandwidth_hz.filter(|b| *b > 0.0) {
        let h = (bn / 2.0).min(x1.max(-x0));
        c.draw_series(std::iter::once(Rectangle::new(
            [(-h.min(-x0), y0), (h.min(x1), y1)],
            YELLOW.mix(0.28).filled(),
        )))?
        .label(format!("necessary bandwidth {bn:.0} Hz"))
        .legend(|(x, y)| Rectangle::new([(x, y - 5), (x + 16, y + 5)], YELLOW.mix(0.5).filled()));
    }
    // Outside the receiver passband: shaded.
    if let (Some([plo, phi]), Some(tone)) = (m.passband_hz, m.tone_hz) {
        let (lo, hi) = (plo - tone, phi - tone);
        if lo > x0 {
            c.draw_series(std::iter::once(Rectangle::new(
                [(x0, y0), (lo.min(x1), y1)],
                MUTED.mix(0.12).filled(),
            )))?;
        }
        if hi < x1 {
            c.draw_series(std::iter::once(Rectangle::new(
                [(hi.max(x0), y0), (x1, y1)],
                MUTED.mix(0.12).filled(),
            )))?;
        }
    }
    if !noise.is_empty() {
        c.draw_series(LineSeries::new(
            noise.iter().map(|&(x, y)| (x, clampy(y))),
            ShapeStyle::from(&ORANGE).stroke_width(1),
        ))?
        .label("noise (key-up gaps)")
        .legend(|(x, y)| PathElement::new([(x, y), (x + 16, y)], ORANGE.stroke_width(2)));
    }
    if let Some(nf) = m.noise_floor_dbc.filter(|v| *v > y0 && *v < y1) {
        c.draw_series(DashedLineSeries::new(
            [(x0, nf), (x1, nf)],
            3,
            4,
            ShapeStyle::from(&MUTED).stroke_width(1),
        ))?
        .label(format!("noise floor {nf:.0} dBc"))
        .legend(|(x, y)| PathElement::new([(x, y), (x + 16, y)], MUTED.stroke_width(1)));
    }
    c.draw_series(LineSeries::new(
        sig.iter().map(|&(x, y)| (x, clampy(y))),
        ShapeStyle::from(&BLUE).stroke_width(2),
    ))?
    .label("keyed signal")
    .legend(|(x, y)| PathElement::new([(x, y), (x + 16, y)], BLUE.stroke_width(2)));
    if let Some(mk) = mask {
        c.draw_series(LineSeries::new(
            mk.points.iter().map(|&(x, y)| (x.clamp(x0, x1), clampy(y))),
            ShapeStyle::from(&PURPLE).stroke_width(3),
        ))?
        .label("mask")
        .legend(|(x, y)| PathElement::new([(x, y), (x + 16, y)], PURPLE.stroke_width(3)));
    }
    if let Some([lo, hi]) = m.occupied_edges_hz {
        let label = match m.occupied_bandwidth_hz {
            Some(b) => format!("99 % power: {b:.0} Hz"),
            None => "99 % power".to_string(),
        };
        for (i, f) in [lo, hi].into_iter().enumerate() {
            if f > x0 && f < x1 {
                let s = c.draw_series(DashedLineSeries::new(
                    [(f, y0), (f, y1)],
                    8,
                    5,
                    ShapeStyle::from(&GREEN).stroke_width(2),
                ))?;
                if i == 0 {
                    s.label(label.clone()).legend(|(x, y)| {
                        PathElement::new([(x, y), (x + 16, y)], GREEN.stroke_width(2))
                    });
                }
            }
        }
    }
    // The x-dB points: a marker at each side, joined by a thin bar.
    for (i, (xdb, [lo, hi])) in m.x_db_edges_hz.iter().enumerate() {
        let y = -xdb;
        if y <= y0 || y >= y1 {
            continue;
        }
        let (a, b) = (lo.clamp(x0, x1), hi.clamp(x0, x1));
        c.draw_series(LineSeries::new(
            [(a, y), (b, y)],
            ShapeStyle::from(&VERMILLION.mix(0.6)).stroke_width(1),
        ))?;
        let s = c.draw_series(
            [(a, y), (b, y)]
                .into_iter()
                .map(|p| TriangleMarker::new(p, 5, VERMILLION.filled())),
        )?;
        if i == 0 {
            s.label("x-dB points")
                .legend(|(x, y)| TriangleMarker::new((x + 8, y), 5, VERMILLION.filled()));
        }
        if look.text {
            c.draw_series(std::iter::once(
                EmptyElement::at((b, y))
                    + Text::new(
                        format!("-{xdb:.0} dB"),
                        (7, -3),
                        look.font(11.0)
                            .color(&VERMILLION)
                            .pos(Pos::new(HPos::Left, VPos::Bottom)),
                    ),
            ))?;
        }
    }
    if look.text {
        c.configure_series_labels()
            .position(SeriesLabelPosition::UpperRight)
            .background_style(PAPER.mix(0.9))
            .border_style(GRID)
            .label_font(look.font(12.0))
            .draw()?;
    }
    Ok(())
}

/// Median of equal-length rows, column by column (rows of other lengths are
/// ignored).
fn median_rows(rows: &[&Vec<f32>], len: usize) -> Vec<f64> {
    let mut col = Vec::with_capacity(rows.len());
    (0..len)
        .map(|j| {
            col.clear();
            col.extend(rows.iter().map(|r| r[j] as f64).filter(|v| v.is_finite()));
            if col.is_empty() {
                f64::NAN
            } else {
                median(&mut col)
            }
        })
        .collect()
}

fn draw_edges<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    e: &EdgesView,
    report: &Report,
    look: Look,
) -> DrawResult<DB> {
    let panels = area.split_evenly((1, 2));
    let s = &report.summary;
    for (k, panel) in panels.iter().enumerate() {
        let (rows, name, fig) = if k == 0 {
            (&e.rises, "rising", s.rise_ms.as_ref().map(|x| x.median))
        } else {
            (&e.falls, "falling", s.fall_ms.as_ref().map(|x| x.median))
        };
        let len = rows.iter().map(|r| r.len()).max().unwrap_or(0);
        let good: Vec<&Vec<f32>> = rows.iter().filter(|r| r.len() == len && len > 1).collect();
        if good.is_empty() || !(e.step_ms.is_finite() && e.step_ms > 0.0) || !e.first_ms.is_finite()
        {
            empty_frame(panel, &format!("No {name} edges in this report."), look)?;
            continue;
        }
        let x0 = e.first_ms;
        let x1 = e.first_ms + e.step_ms * (len - 1) as f64;
        let (y0, y1) = (-0.12, 1.15);
        let x_desc = format!("Time from the 50 % instant (ms), {name} edges");
        let mut c = chart(
            panel,
            x0..x1,
            y0..y1,
            &x_desc,
            "Normalised level",
            look,
            &fmt_auto,
            &|v| format!("{v:.1}"),
        )?;
        let stride = (len / MAX_LINE_POINTS).max(1);
        let xs = |j: usize| x0 + e.step_ms * j as f64;
        for frac in [0.1, 0.9] {
            c.draw_series(DashedLineSeries::new(
                [(x0, frac), (x1, frac)],
                6,
                4,
                ShapeStyle::from(&MUTED).stroke_width(1),
            ))?;
            if look.text {
                c.draw_series(std::iter::once(Text::new(
                    format!("{:.0} %", frac * 100.0),
                    (x0, frac),
                    look.muted(11.0).pos(Pos::new(HPos::Left, VPos::Bottom)),
                )))?;
            }
        }
        c.draw_series(LineSeries::new(
            [(0.0, y0), (0.0, y1)],
            ShapeStyle::from(&MUTED.mix(0.6)).stroke_width(1),
        ))?;
        let colour = if k == 0 { SKY } else { ORANGE };
        let alpha = if good.len() > 50 { 0.18 } else { 0.45 };
        for i in pick(good.len(), MAX_LINES) {
            let r = good[i];
            c.draw_series(LineSeries::new(
                (0..len)
                    .step_by(stride)
                    .chain(std::iter::once(len - 1))
                    .map(|j| (xs(j), (r[j] as f64).clamp(y0, y1)))
                    .filter(|p| p.1.is_finite()),
                ShapeStyle::from(&colour.mix(alpha)).stroke_width(1),
            ))?;
        }
        let med = median_rows(&good, len);
        c.draw_series(LineSeries::new(
            (0..len)
                .filter(|&j| med[j].is_finite())
                .map(|j| (xs(j), med[j].clamp(y0, y1))),
            ShapeStyle::from(&INK).stroke_width(3),
        ))?;
        if look.text {
            let mut note = format!("{} edges, median bold", good.len());
            if let Some(ms) = fig {
                note.push_str(&format!("; median 10–90 %: {ms:.2} ms"));
            }
            c.draw_series(std::iter::once(Text::new(
                note,
                (x0, 1.13),
                look.font(11.0).pos(Pos::new(HPos::Left, VPos::Top)),
            )))?;
        }
    }
    Ok(())
}

fn draw_chirp<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    report: &Report,
    look: Look,
) -> DrawResult<DB> {
    let traces: Vec<(Kind, &[(f32, f32)])> = report
        .elements
        .iter()
        .filter(|e| e.trace.len() >= 2)
        .map(|e| (e.kind, e.trace.as_slice()))
        .collect();
    if traces.is_empty() {
        return empty_frame(area, "No frequency traces in this report.", look);
    }
    let ms = |t: f32| t as f64 * 1000.0;
    let (x0, x1) = finite_range(
        traces
            .iter()
            .flat_map(|(_, t)| [ms(t[0].0), ms(t[t.len() - 1].0)]),
    )
    .unwrap_or((0.0, 100.0));
    let x0 = x0.min(0.0);
    let x1 = if x1 > x0 { x1 } else { x0 + 1.0 };
    // Vertical range: the 1st to 99th percentile of the deviations, so one
    // wild point does not flatten the rest; at least ±5 Hz.
    let mut devs: Vec<f64> = traces
        .iter()
        .flat_map(|(_, t)| t.iter().step_by((t.len() / 50).max(1)).map(|p| p.1 as f64))
        .filter(|v| v.is_finite())
        .collect();
    devs.sort_by(|a, b| a.total_cmp(b));
    let (lo, hi) = if devs.is_empty() {
        (-5.0, 5.0)
    } else {
        (
            devs[devs.len() / 100],
            devs[(devs.len() * 99 / 100).min(devs.len() - 1)],
        )
    };
    let span = (hi - lo).max(10.0);
    let mid = 0.5 * (hi + lo);
    let (y0, y1) = (mid - 0.6 * span, mid + 0.6 * span);
    let (y0, y1) = (y0.min(-5.0), y1.max(5.0));
    let mut c = chart(
        area,
        x0..x1,
        y0..y1,
        "Time since the 50 % rise (ms)",
        "Frequency deviation (Hz)",
        look,
        &fmt_auto,
        &fmt_auto,
    )?;
    c.draw_series(LineSeries::new(
        [(x0, 0.0), (x1, 0.0)],
        ShapeStyle::from(&MUTED).stroke_width(1),
    ))?;
    let alpha = if traces.len() > 50 { 0.25 } else { 0.55 };
    let mut seen = [false, false];
    for i in pick(traces.len(), MAX_LINES) {
        let (kind, t) = traces[i];
        let stride = (t.len() / MAX_LINE_POINTS).max(1);
        let (colour, k) = match kind {
            Kind::Dit => (SKY, 0),
            Kind::Dah => (ORANGE, 1),
        };
        let s = c.draw_series(LineSeries::new(
            t.iter()
                .step_by(stride)
                .chain(std::iter::once(&t[t.len() - 1]))
                .map(|p| (ms(p.0), (p.1 as f64).clamp(y0, y1)))
                .filter(|p| p.0.is_finite() && p.1.is_finite()),
            ShapeStyle::from(&colour.mix(alpha)).stroke_width(1),
        ))?;
        if !seen[k] {
            seen[k] = true;
            s.label(if k == 0 { "dits" } else { "dahs" })
                .legend(move |(x, y)| {
                    PathElement::new([(x, y), (x + 16, y)], colour.stroke_width(2))
                });
        }
    }
    // Median over the elements that cover each instant, on a common grid.
    let n = MAX_MEDIAN_POINTS;
    let step = (x1 - x0) / (n - 1) as f64;
    let need = if traces.len() >= 3 { 3 } else { 1 };
    let mut col = Vec::with_capacity(traces.len());
    let mut med = Vec::with_capacity(n);
    let mut cursor = vec![0usize; traces.len()];
    for j in 0..n {
        let x = x0 + step * j as f64;
        col.clear();
        for (ti, (_, t)) in traces.iter().enumerate() {
            if x < ms(t[0].0) || x > ms(t[t.len() - 1].0) {
                continue;
            }
            let c = &mut cursor[ti];
            while *c + 2 < t.len() && ms(t[*c + 1].0) < x {
                *c += 1;
            }
            let (a, b) = (t[*c], t[(*c + 1).min(t.len() - 1)]);
            let (ta, tb) = (ms(a.0), ms(b.0));
            let v = if tb > ta {
                a.1 as f64 + (b.1 as f64 - a.1 as f64) * ((x - ta) / (tb - ta)).clamp(0.0, 1.0)
            } else {
                a.1 as f64
            };
            if v.is_finite() {
                col.push(v);
            }
        }
        if col.len() >= need {
            med.push(Some((x, median(&mut col).clamp(y0, y1))));
        } else {
            med.push(None);
        }
    }
    // Draw each covered run of the median as its own line.
    let mut run: Vec<(f64, f64)> = Vec::new();
    let mut first = true;
    for p in med.into_iter().chain(std::iter::once(None)) {
        match p {
            Some(q) => run.push(q),
            None => {
                if run.len() >= 2 {
                    let s = c.draw_series(LineSeries::new(
                        run.drain(..),
                        ShapeStyle::from(&INK).stroke_width(3),
                    ))?;
                    if first {
                        first = false;
                        s.label("median").legend(|(x, y)| {
                            PathElement::new([(x, y), (x + 16, y)], INK.stroke_width(3))
                        });
                    }
                }
                run.clear();
            }
        }
    }
    if look.text {
        c.configure_series_labels()
            .position(SeriesLabelPosition::UpperRight)
            .background_style(PAPER.mix(0.9))
            .border_style(GRID)
            .label_font(look.font(12.0))
            .draw()?;
    }
    Ok(())
}

fn draw_envelope<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    views: &Views,
    report: &Report,
    look: Look,
) -> DrawResult<DB> {
    let pts: Vec<(f64, f64)> = views
        .envelope
        .iter()
        .map(|&(t, l)| (t as f64, l as f64))
        .filter(|p| p.0.is_finite() && p.1.is_finite())
        .collect();
    if pts.is_empty() {
        return empty_frame(area, "No envelope in this report.", look);
    }
    let (x0, x1) = finite_range(pts.iter().map(|p| p.0)).unwrap_or((0.0, 1.0));
    let x1 = if x1 > x0 { x1 } else { x0 + 1.0 };
    let (lo, hi) = finite_range(pts.iter().map(|p| p.1)).unwrap_or((-100.0, 0.0));
    let y1 = ((hi + 3.0) / 10.0).ceil() * 10.0;
    let y0 = (lo.max(hi - 120.0) / 10.0).floor() * 10.0 - 2.0;
    let y1 = y1.max(y0 + 10.0);
    let mut c = chart(
        area,
        x0..x1,
        y0..y1,
        "Time (s)",
        "Envelope level (dBFS)",
        look,
        &fmt_auto,
        &fmt0,
    )?;
    c.draw_series(AreaSeries::new(
        pts.iter().map(|&(x, y)| (x, y.clamp(y0, y1))),
        y0,
        BLUE.mix(0.15),
    ))?;
    c.draw_series(LineSeries::new(
        pts.iter().map(|&(x, y)| (x, y.clamp(y0, y1))),
        ShapeStyle::from(&BLUE).stroke_width(1),
    ))?
    .label("envelope (peak of each stretch)")
    .legend(|(x, y)| PathElement::new([(x, y), (x + 16, y)], BLUE.stroke_width(2)));
    if let Some(l) = report.summary.level_dbfs.filter(|l| *l > y0 && *l < y1) {
        c.draw_series(DashedLineSeries::new(
            [(x0, l), (x1, l)],
            8,
            5,
            ShapeStyle::from(&VERMILLION).stroke_width(2),
        ))?
        .label(format!("median key-down level {l:.1} dBFS"))
        .legend(|(x, y)| PathElement::new([(x, y), (x + 16, y)], VERMILLION.stroke_width(2)));
    }
    if look.text {
        c.configure_series_labels()
            .position(SeriesLabelPosition::LowerRight)
            .background_style(PAPER.mix(0.9))
            .border_style(GRID)
            .label_font(look.font(12.0))
            .draw()?;
    }
    Ok(())
}

/// Synthetic views for development and tests, shaped like real ones: a
/// Gaussian-shaped spectrum with sidebands, a noise spectrum, a spectrogram
/// following the elements, raised-cosine edges with a little scatter and an
/// envelope. Not a measurement: nothing in a real report comes from here.
#[doc(hidden)]
pub fn example_views(report: &Report) -> Views {
    use crate::analysis::views::{EdgesView, SpectrogramView, SpectrumView};
    let mut seed: u64 = 0x2545_f491_4f6c_dd1d;
    let mut rnd = move || {
        seed ^= seed << 13;
        seed ^= seed >> 7;
        seed ^= seed << 17;
        (seed >> 11) as f64 / (1u64 << 53) as f64 - 0.5
    };
    let n = 801;
    let step = 2.5;
    let first = -1000.0;
    let spec: Vec<f32> = (0..n)
        .map(|i| {
            let f: f64 = first + step * i as f64;
            let main = -(f / 18.0).powi(2) * 4.34;
            let side = -22.0 - f.abs() / 14.0;
            (main.max(side).max(-78.0) + rnd() * 2.0) as f32
        })
        .collect();
    let noise: Vec<f32> = (0..n).map(|_| (-80.0 + rnd() * 3.0) as f32).collect();
    let tone = report.summary.tone_hz.unwrap_or(700.0);
    let dur = report.input.duration_s.max(1.0);
    let cols = 1000.min((dur / 0.01) as usize).max(10);
    let dt = dur / cols as f64;
    let rows = 200;
    let df = 10.0;
    let f0 = (tone - 1000.0).max(0.0);
    let mut on = vec![false; cols];
    for e in &report.elements {
        let a = ((e.start_s / dt) as usize).min(cols);
        let b = (((e.start_s + e.duration_s) / dt).ceil() as usize).min(cols);
        for o in &mut on[a..b] {
            *o = true;
        }
    }
    let mut sg = Vec::with_capacity(rows * cols);
    for r in 0..rows {
        let off = f0 + df * r as f64 - tone;
        for &k in &on {
            let v = if k {
                (-(off / 25.0).powi(2) * 4.34).max(-30.0 - off.abs() / 12.0)
            } else {
                -200.0
            };
            sg.push((v.max(-82.0) + rnd() * 4.0) as f32);
        }
    }
    let len = 161;
    let first_ms = -8.0;
    let step_ms = 0.1;
    let edge = |scale: f64, shift: f64, rising: bool| -> Vec<f32> {
        (0..len)
            .map(|j| {
                let t = (first_ms + step_ms * j as f64 - shift) / scale;
                // Raised cosine over 8.47 ms: 10-90 % = 0.5903 T = 5 ms.
                let u = (t / 8.47 + 0.5).clamp(0.0, 1.0);
                let v = 0.5 - 0.5 * (std::f64::consts::PI * u).cos();
                (if rising { v } else { 1.0 - v }) as f32
            })
            .collect()
    };
    let mut rises = Vec::new();
    let mut falls = Vec::new();
    for _ in 0..report.elements.len().max(20) {
        rises.push(edge(1.0 + 0.1 * rnd(), 0.2 * rnd(), true));
        falls.push(edge(0.6 + 0.1 * rnd(), 0.2 * rnd(), false));
    }
    let level = report.summary.level_dbfs.unwrap_or(-12.0);
    let env: Vec<(f32, f32)> = (0..cols)
        .map(|i| {
            let v = if on[i] {
                level + rnd() * 0.3
            } else {
                -75.0 + rnd() * 4.0
            };
            ((dt * i as f64) as f32, v as f32)
        })
        .collect();
    Views {
        spectrum: SpectrumView {
            first_offset_hz: first,
            step_hz: step,
            dbc: spec,
            rbw_hz: 3.8,
        },
        noise: SpectrumView {
            first_offset_hz: first,
            step_hz: step,
            dbc: noise,
            rbw_hz: 3.8,
        },
        spectrogram: SpectrogramView {
            t0_s: 0.0,
            dt_s: dt,
            f0_hz: f0,
            df_hz: df,
            rows,
            cols,
            dbc: sg,
        },
        envelope: env,
        edges: EdgesView {
            first_ms,
            step_ms,
            rises,
            falls,
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn colour_scale_runs_dark_to_light() {
        let lum = |c: [u8; 3]| 0.2126 * c[0] as f64 + 0.7152 * c[1] as f64 + 0.0722 * c[2] as f64;
        let mut last = -1.0;
        for i in 0..=20 {
            let l = lum(scale_colour(i as f64 / 20.0));
            assert!(l > last, "luminance must rise monotonically for grey print");
            last = l;
        }
        assert_eq!(scale_colour(f64::NAN), scale_colour(0.0));
    }

    #[test]
    fn pick_is_bounded_and_spread() {
        assert_eq!(pick(5, 300), vec![0, 1, 2, 3, 4]);
        let p = pick(3500, 300);
        assert_eq!(p.len(), 300);
        assert!(p.windows(2).all(|w| w[1] > w[0]));
        assert!(*p.last().unwrap() >= 3400);
    }

    #[test]
    fn mask_parses_comments_and_separators() {
        let m = Mask::parse(
            "# a mask\n-500 -60\n-100, -30 # inner\n\n100\t-30\n500 -60\n",
            Path::new("m.txt"),
        )
        .unwrap();
        assert_eq!(
            m.points,
            vec![
                (-500.0, -60.0),
                (-100.0, -30.0),
                (100.0, -30.0),
                (500.0, -60.0)
            ]
        );
    }
}
