//! Training curves as SVG or PNG (by the file extension), drawn with `plotters`.
//!
//! Text (in SVG and PNG alike) is laid out with the first TrueType font found: the file named by
//! the `SINEW_FONT` environment variable, else a DejaVu or Liberation sans font in the usual
//! system font folders; without one the PNG is drawn without text (and a note says so).

use crate::engine::train::EpochReport;
use plotters::prelude::*;
use std::path::Path;

const FONT_CANDIDATES: &[&str] = &[
    "/usr/share/fonts/truetype/dejavu/DejaVuSans.ttf",
    "/usr/share/fonts/TTF/DejaVuSans.ttf",
    "/usr/share/fonts/dejavu/DejaVuSans.ttf",
    "/usr/share/fonts/truetype/liberation/LiberationSans-Regular.ttf",
    "/Library/Fonts/Arial.ttf",
    "C:\\Windows\\Fonts\\arial.ttf",
];

/// Registers a font once per process; true when one was found.
fn register_font() -> bool {
    static FOUND: std::sync::OnceLock<bool> = std::sync::OnceLock::new();
    *FOUND.get_or_init(find_and_register_font)
}

fn find_and_register_font() -> bool {
    let env = std::env::var("SINEW_FONT").ok();
    let candidates = env
        .iter()
        .map(String::as_str)
        .chain(FONT_CANDIDATES.iter().copied());
    for path in candidates {
        if let Ok(bytes) = std::fs::read(path) {
            let leaked: &'static [u8] = Box::leak(bytes.into_boxed_slice());
            if plotters::style::register_font("sans-serif", FontStyle::Normal, leaked).is_ok() {
                return true;
            }
        }
    }
    false
}

fn no_text(text: bool) -> Option<String> {
    (!text).then(|| {
        "no TrueType font found: the plot has no text (set SINEW_FONT to a .ttf file)".to_string()
    })
}

/// Plot size in pixels.
const SIZE: (u32, u32) = (900, 560);

/// Draws the training (and validation, when present) cost per epoch into `path`. The picture is
/// drawn in memory, then written with [`crate::fsutil::write_atomic`] (temporary sibling, flushed
/// to disk, renamed into place), so a failed or interrupted write leaves an existing file as it
/// was. Returns a note for the user when the plot had to be drawn without text.
pub fn cost_curves(
    history: &[EpochReport],
    title: &str,
    path: &Path,
) -> Result<Option<String>, String> {
    let ext = path
        .extension()
        .and_then(|e| e.to_str())
        .unwrap_or("")
        .to_ascii_lowercase();
    let (bytes, note) = match ext.as_str() {
        "svg" => {
            let text = register_font();
            let mut svg = String::new();
            draw(
                SVGBackend::with_string(&mut svg, SIZE).into_drawing_area(),
                history,
                title,
                text,
            )?;
            (svg.into_bytes(), no_text(text))
        }
        "png" => {
            let text = register_font();
            let (w, h) = SIZE;
            let mut rgb = vec![0u8; w as usize * h as usize * 3];
            draw(
                BitMapBackend::with_buffer(&mut rgb, SIZE).into_drawing_area(),
                history,
                title,
                text,
            )?;
            (png_bytes(&rgb, w, h)?, no_text(text))
        }
        _ => {
            return Err(format!(
                "cannot plot to {}: use a .svg or .png file",
                path.display()
            ))
        }
    };
    crate::fsutil::write_atomic(path, &bytes)
        .map_err(|e| format!("cannot write {}: {e}", path.display()))?;
    Ok(note)
}

/// An 8-bit RGB image encoded as PNG in memory.
fn png_bytes(rgb: &[u8], width: u32, height: u32) -> Result<Vec<u8>, String> {
    let err = |e: png::EncodingError| format!("cannot encode the plot as PNG: {e}");
    let mut out = Vec::new();
    let mut encoder = png::Encoder::new(&mut out, width, height);
    encoder.set_color(png::ColorType::Rgb);
    encoder.set_depth(png::BitDepth::Eight);
    let mut writer = encoder.write_header().map_err(err)?;
    writer.write_image_data(rgb).map_err(err)?;
    writer.finish().map_err(err)?;
    Ok(out)
}

fn draw<DB: DrawingBackend>(
    root: DrawingArea<DB, plotters::coord::Shift>,
    history: &[EpochReport],
    title: &str,
    text: bool,
) -> Result<(), String>
where
    DB::ErrorType: 'static,
{
    let err = |e: DrawingAreaErrorKind<DB::ErrorType>| format!("cannot draw the plot: {e:?}");
    root.fill(&WHITE).map_err(err)?;
    let train: Vec<(f64, f64)> = history
        .iter()
        .map(|r| (f64::from(r.epoch), r.train_cost))
        .collect();
    let valid: Vec<(f64, f64)> = history
        .iter()
        .filter_map(|r| r.validation_cost.map(|v| (f64::from(r.epoch), v)))
        .collect();
    let all = train
        .iter()
        .chain(&valid)
        .map(|p| p.1)
        .filter(|v| v.is_finite());
    let (lo, hi) = all.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
        (a.min(v), b.max(v))
    });
    let (lo, hi) = if lo.is_finite() { (lo, hi) } else { (0.0, 1.0) };
    let pad = ((hi - lo) * 0.05).max(1e-12);
    let last = history.last().map_or(1.0, |r| f64::from(r.epoch.max(1)));
    let mut builder = ChartBuilder::on(&root);
    builder.margin(20);
    if text {
        builder
            .caption(title, ("sans-serif", 24))
            .x_label_area_size(45)
            .y_label_area_size(70);
    }
    let mut chart = builder
        .build_cartesian_2d(0.0..last, (lo - pad).max(0.0)..hi + pad)
        .map_err(err)?;
    let mut mesh = chart.configure_mesh();
    if text {
        // Epochs are whole numbers: the axis labels say so.
        mesh.x_desc("epoch")
            .y_desc("cost")
            .x_label_formatter(&|e: &f64| format!("{e:.0}"));
    } else {
        mesh.disable_x_axis().disable_y_axis();
    }
    mesh.draw().map_err(err)?;
    let blue = RGBColor(31, 119, 180);
    let orange = RGBColor(230, 120, 20);
    let s = chart
        .draw_series(LineSeries::new(train, blue.stroke_width(2)))
        .map_err(err)?;
    if text {
        s.label("training")
            .legend(move |(x, y)| PathElement::new([(x, y), (x + 20, y)], blue));
    }
    if !valid.is_empty() {
        let s = chart
            .draw_series(LineSeries::new(valid, orange.stroke_width(2)))
            .map_err(err)?;
        if text {
            s.label("validation")
                .legend(move |(x, y)| PathElement::new([(x, y), (x + 20, y)], orange));
        }
    }
    if text {
        chart
            .configure_series_labels()
            .border_style(BLACK)
            .background_style(WHITE)
            .draw()
            .map_err(err)?;
    }
    root.present().map_err(err)
}
