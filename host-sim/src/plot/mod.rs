//! Plots of a check (PNG and SVG): the conditioned trace with lib's baseline, the detected peaks,
//! matched lines labelled in the trade's notation (Hα, Dβ, He II 4→3), unexplained peaks marked, and a
//! panel of line errors (measured − predicted) with the profile's limit.
//!
//! Text is drawn with DejaVu Sans embedded in the binary, so plots look the same on any machine.
pub mod capture;
pub mod labels;

use crate::defaults::write_atomic;
use capture::Checked;
use glowcheck::judge::Mode;
use plotters::coord::Shift;
use plotters::prelude::*;
use std::path::Path;
use std::sync::Once;

/// Size of every plot, px.
pub const SIZE: (u32, u32) = (1500, 950);

const FONT: &str = "sans-serif";
const FRAME_COLOUR: RGBColor = RGBColor(40, 70, 160);
const BASELINE_COLOUR: RGBColor = RGBColor(230, 130, 0);
const MATCH_COLOUR: RGBColor = RGBColor(0, 130, 60);
const FOREIGN_COLOUR: RGBColor = RGBColor(200, 20, 30);

/// What the plot says besides the check itself.
pub struct PlotMeta<'a> {
    /// First title line (tube and profile).
    pub title: &'a str,
    /// Stored scale of the instrument, plain λ(p) coefficients (nm), used when the report has none.
    pub stored_nm: [f64; 4],
    /// Medium of the wavelengths, for the axis label ("standard air", "vacuum", ...).
    pub medium: &'a str,
}

fn register_font() {
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        let _ = plotters::style::register_font(FONT, FontStyle::Normal, dejavu::sans::regular());
        let _ = plotters::style::register_font(FONT, FontStyle::Bold, dejavu::sans::bold());
    });
}

/// Writes `png` and `svg` (each through a temporary file and a rename).
pub fn write(c: &Checked, meta: &PlotMeta<'_>, png: &Path, svg: &Path) -> Result<(), String> {
    register_font();
    let mut text = String::new();
    {
        let root = SVGBackend::with_string(&mut text, SIZE).into_drawing_area();
        draw(&root, c, meta).map_err(|e| format!("SVG plot: {e}"))?;
        root.present().map_err(|e| format!("SVG plot: {e}"))?;
    }
    write_atomic(svg, text.as_bytes())?;
    let dir = png
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = png
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    // The backend picks the format from the extension, so the temporary name ends in .png too.
    let tmp = dir.join(format!(".{name}.tmp.{}.png", std::process::id()));
    let drawn = {
        let root = BitMapBackend::new(&tmp, SIZE).into_drawing_area();
        draw(&root, c, meta)
            .and_then(|()| root.present())
            .map_err(|e| e.to_string())
    };
    drawn
        .and_then(|()| std::fs::rename(&tmp, png).map_err(|e| e.to_string()))
        .map_err(|e| {
            let _ = std::fs::remove_file(&tmp);
            format!("cannot write {}: {e}", png.display())
        })
}

fn nm_at(c: &[f64; 4], p: f64) -> f64 {
    c[0] + p * (c[1] + p * (c[2] + p * c[3]))
}

/// Short form of a foreign-line hint: "N2 357.7 band head (air leak?)" → "N2 357.7 band head?".
fn short_hint(h: &str) -> String {
    match h.split_once(" (") {
        Some((a, _)) => format!("{a}?"),
        None => format!("{h}?"),
    }
}

type DrawResult<T, DB> = Result<T, DrawingAreaErrorKind<<DB as DrawingBackend>::ErrorType>>;

fn draw<DB: DrawingBackend>(
    root: &DrawingArea<DB, Shift>,
    c: &Checked,
    meta: &PlotMeta<'_>,
) -> DrawResult<(), DB> {
    let r = &c.report;
    let j = crate::report_out::to_json(r);
    let coeffs = j.calibration.coefficients_nm.unwrap_or(meta.stored_nm);
    let n = c.frame_counts.len();
    root.fill(&WHITE)?;
    let (top, bottom) = root.split_vertically(SIZE.1 * 64 / 100);

    // Upper panel: frame, baseline, peaks, labels.
    // The floor sits a little under the lowest baseline so the noise band stays visible.
    let base_min = c.baseline_counts.iter().cloned().fold(f64::MAX, f64::min);
    let floor = (base_min * 0.6).max(1.0);
    let floor = 10f64.powf(floor.log10().floor());
    let peak_max = c.frame_counts.iter().cloned().fold(floor * 10.0, f64::max);
    let decades = (peak_max / floor).log10();
    let y_top = floor * 10f64.powf(decades / 0.72);
    let x0 = nm_at(&coeffs, 0.0);
    let x1 = nm_at(&coeffs, (n.max(2) - 1) as f64);
    let verdict = j.verdict.to_uppercase();
    let why = r
        .reasons
        .first()
        .map_or("every rule of the profile is met".to_string(), |x| {
            x.to_string()
        });
    let caption = format!("{} — {verdict}", meta.title);
    let mut chart = ChartBuilder::on(&top)
        .margin_left(16)
        .margin_right(28)
        .margin_top(10)
        .caption(caption, (FONT, 26).into_font().style(FontStyle::Bold))
        .x_label_area_size(48)
        .y_label_area_size(90)
        .build_cartesian_2d(x0.min(x1)..x0.max(x1), (floor..y_top).log_scale())?;
    chart
        .configure_mesh()
        .light_line_style(WHITE.mix(0.0))
        .bold_line_style(BLACK.mix(0.08))
        .x_desc(format!("wavelength (nm, {})", meta.medium))
        .y_desc("counts per readout (log scale)")
        .label_style((FONT, 17))
        .axis_desc_style((FONT, 18))
        .y_label_formatter(&|v| {
            if *v >= 1000.0 {
                format!("{:.0}k", v / 1000.0)
            } else {
                format!("{v:.0}")
            }
        })
        .draw()?;
    let clamp = |v: f64| v.max(floor);
    chart
        .draw_series(LineSeries::new(
            (0..n).map(|p| (nm_at(&coeffs, p as f64), clamp(c.frame_counts[p]))),
            FRAME_COLOUR.stroke_width(1),
        ))?
        .label("conditioned frame")
        .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 24, y)], FRAME_COLOUR.stroke_width(2)));
    chart
        .draw_series(LineSeries::new(
            (0..n).map(|p| (nm_at(&coeffs, p as f64), clamp(c.baseline_counts[p]))),
            BASELINE_COLOUR.stroke_width(2),
        ))?
        .label("baseline")
        .legend(|(x, y)| {
            PathElement::new(vec![(x, y), (x + 24, y)], BASELINE_COLOUR.stroke_width(2))
        });
    let top_at = |px: f64| -> f64 {
        let k = px.round().max(0.0) as usize;
        (k.saturating_sub(1)..=(k + 1).min(n - 1))
            .map(|i| c.frame_counts[i])
            .fold(floor, f64::max)
    };
    // Peaks: matched (green dot) and unexplained (red cross), each with its label text.
    struct Mark {
        nm: f64,
        y: f64,
        text: String,
        matched: bool,
        snr: f64,
    }
    let mut marks: Vec<Mark> = j
        .lines
        .iter()
        .map(|l| Mark {
            nm: nm_at(&coeffs, l.center_px),
            y: top_at(l.center_px),
            text: l.label.replace("->", "→"),
            matched: true,
            snr: l.snr,
        })
        .collect();
    marks.extend(j.unexplained.iter().map(|u| Mark {
        nm: nm_at(&coeffs, u.center_px),
        y: top_at(u.center_px),
        text: u.hint.map_or("?".to_string(), short_hint),
        matched: false,
        snr: u.snr,
    }));
    chart
        .draw_series(
            marks
                .iter()
                .filter(|m| m.matched)
                .map(|m| Circle::new((m.nm, m.y), 5, MATCH_COLOUR.filled())),
        )?
        .label("matched line")
        .legend(|(x, y)| Circle::new((x + 12, y), 5, MATCH_COLOUR.filled()));
    chart
        .draw_series(
            marks
                .iter()
                .filter(|m| !m.matched)
                .map(|m| Cross::new((m.nm, m.y), 7, FOREIGN_COLOUR.stroke_width(3))),
        )?
        .label("unexplained peak")
        .legend(|(x, y)| Cross::new((x + 12, y), 6, FOREIGN_COLOUR.stroke_width(3)));
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::LowerRight)
        .label_font((FONT, 16))
        .background_style(WHITE.mix(0.9))
        .border_style(BLACK.mix(0.4))
        .draw()?;

    // Labels in rows along the top of the plot, strongest peaks first, leader lines down to the peak.
    let label_font: TextStyle = (FONT, 16).into_font().into();
    let (area_x, area_y) = chart.plotting_area().get_pixel_range();
    let row_h = 22;
    let rows = 6;
    marks.sort_by(|a, b| b.snr.total_cmp(&a.snr));
    let items: Vec<(i32, i32)> = marks
        .iter()
        .map(|m| {
            let (x, _) = chart.backend_coord(&(m.nm, m.y));
            let w = root
                .estimate_text_size(&m.text, &label_font)
                .map_or(30, |s| s.0 as i32);
            (x, w)
        })
        .collect();
    let placed = labels::place(&items, rows, 6, area_x.start, area_x.end);
    let omitted = placed.iter().filter(|p| p.is_none()).count();
    // Leader lines first, then the labels on white, so that no line runs through a label.
    for ((m, p), &(x, _)) in marks.iter().zip(&placed).zip(&items) {
        let Some(p) = p else { continue };
        let colour = if m.matched {
            MATCH_COLOUR
        } else {
            FOREIGN_COLOUR
        };
        let from = area_y.start + 4 + p.row as i32 * row_h + row_h - 4;
        let (_, py) = chart.backend_coord(&(m.nm, m.y));
        if py - 8 > from {
            root.draw(&PathElement::new(
                vec![(x, from), (x, py - 8)],
                colour.mix(0.35).stroke_width(1),
            ))?;
        }
    }
    for ((m, p), &(_, w)) in marks.iter().zip(&placed).zip(&items) {
        let Some(p) = p else { continue };
        let colour = if m.matched {
            MATCH_COLOUR
        } else {
            FOREIGN_COLOUR
        };
        let ty = area_y.start + 4 + p.row as i32 * row_h;
        root.draw(&Rectangle::new(
            [(p.left - 2, ty - 1), (p.left + w + 2, ty + row_h - 5)],
            WHITE.filled(),
        ))?;
        root.draw(&Text::new(
            m.text.clone(),
            (p.left, ty),
            label_font.color(&colour),
        ))?;
    }
    let note = if omitted > 0 {
        format!("{why}   ({omitted} label(s) left out for space; all lines are in the JSON report)")
    } else {
        why
    };
    root.draw(&Text::new(
        note,
        (area_x.start, area_y.end + 52),
        (FONT, 17).into_font().color(&BLACK),
    ))?;

    // Lower panel: line errors with 1-σ bars and the profile's limit.
    let limit_pm = f64::from(c.profile.max_line_error_fm) / 1000.0;
    let errs: Vec<(f64, f64, f64)> = j
        .lines
        .iter()
        .map(|l| (l.measured_nm, l.error_nm * 1000.0, l.sigma_nm * 1000.0))
        .collect();
    let span = errs
        .iter()
        .map(|e| e.1.abs() + e.2)
        .fold(limit_pm * 1.4, f64::max)
        .min(limit_pm * 6.0);
    let what = match r.mode {
        Mode::Verify => "line error on the stored scale",
        _ => "calibration residual on the fitted scale",
    };
    let mut sub = format!("{what}: measured − predicted (pm), 1-σ bars; limit ±{limit_pm:.0} pm");
    if let Some(v) = j.calibration.rms_residual_nm {
        sub.push_str(&format!("; RMS {:.1} pm", v * 1000.0));
    }
    if let Some(d) = j.calibration.drift_nm {
        sub.push_str(&format!("; drift from stored scale {:+.3} nm", d));
    }
    let bottom = bottom.margin(18, 6, 0, 0);
    let mut res = ChartBuilder::on(&bottom)
        .margin_left(16)
        .margin_right(28)
        .caption(sub, (FONT, 19))
        .x_label_area_size(46)
        .y_label_area_size(90)
        .build_cartesian_2d(x0.min(x1)..x0.max(x1), -span..span)?;
    res.configure_mesh()
        .light_line_style(WHITE.mix(0.0))
        .bold_line_style(BLACK.mix(0.08))
        .x_desc(format!("wavelength (nm, {})", meta.medium))
        .y_desc("error (pm)")
        .y_label_formatter(&|v| format!("{v:.0}"))
        .label_style((FONT, 16))
        .axis_desc_style((FONT, 18))
        .y_labels(7)
        .draw()?;
    for lim in [limit_pm, -limit_pm] {
        res.draw_series(LineSeries::new(
            [(x0, lim), (x1, lim)],
            FOREIGN_COLOUR.mix(0.6).stroke_width(1),
        ))?;
    }
    res.draw_series(LineSeries::new(
        [(x0, 0.0), (x1, 0.0)],
        BLACK.mix(0.5).stroke_width(1),
    ))?;
    let clip = |v: f64| v.clamp(-span, span);
    for &(x, e, s) in &errs {
        res.draw_series(LineSeries::new(
            [(x, clip(e - s)), (x, clip(e + s))],
            MATCH_COLOUR.stroke_width(2),
        ))?;
    }
    res.draw_series(errs.iter().map(|&(x, e, _)| {
        let colour = if e.abs() > limit_pm {
            FOREIGN_COLOUR
        } else {
            MATCH_COLOUR
        };
        Circle::new((x, clip(e)), 5, colour.filled())
    }))?;
    // Points beyond the panel sit on its edge with their value written beside them.
    for &(x, e, _) in errs.iter().filter(|e| e.1.abs() > span) {
        let (px, py) = res.backend_coord(&(x, clip(e)));
        let dy = if e > 0.0 { 6 } else { -24 };
        root.draw(&Text::new(
            format!("{e:+.0} pm"),
            (px + 10, py + dy),
            (FONT, 16).into_font().color(&FOREIGN_COLOUR),
        ))?;
    }
    if errs.is_empty() {
        let (ax, ay) = res.plotting_area().get_pixel_range();
        root.draw(&Text::new(
            "no predicted line matched: nothing to show",
            (ax.start + 20, (ay.start + ay.end) / 2 - 30),
            (FONT, 18).into_font().color(&FOREIGN_COLOUR),
        ))?;
    }
    Ok(())
}
