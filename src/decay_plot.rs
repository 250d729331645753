//! The SVG of `partita analyze --svg`: one panel per band (broadband first) and one row of panels per channel.
//! Each panel shows, against time from the band's onset, the squared response averaged over 10 ms (grey, dB
//! re. its peak), the noise floor Lundeby's method found (dashed black) and where the decay meets it (dotted),
//! the compensated Schroeder curve (blue) and the fitted EDT, T20 and T30 lines over their ranges (orange,
//! green, red). Drawn with plotters' SVG backend.

use std::path::Path;

use partita_room::analysis::{BandAnalysis, ChannelAnalysis, Parameter};
use plotters::prelude::*;

/// Lowest level drawn, dB.
const FLOOR_DB: f64 = -100.0;
/// Averaging interval of the grey energy curve, s.
pub const SMOOTH_S: f64 = 0.01;

/// The grey curve of one band: `x[onset..]` squared, averaged over [`SMOOTH_S`], in dB re. the largest squared
/// sample.
pub fn smoothed_energy_db(x: &[f64], onset: usize, sample_rate_hz: f64) -> Vec<f64> {
    let x = &x[onset.min(x.len())..];
    let peak = x.iter().fold(0.0f64, |m, v| m.max(v * v));
    let len = ((SMOOTH_S * sample_rate_hz).round() as usize).max(1);
    x.chunks(len).map(|c| 10.0 * (c.iter().map(|v| v * v).sum::<f64>() / c.len() as f64 / peak).log10()).collect()
}

fn band_label(b: &BandAnalysis) -> String {
    b.band.map_or("broadband".to_string(), |band| band.to_string())
}

/// Writes the decay plot of `channels` to `path`. `energy_db[channel][band]` is the grey curve: the band's
/// squared response from its onset averaged over [`SMOOTH_S`], in dB re. its peak squared sample, the bands in
/// the analyses' order (broadband first); see [`smoothed_energy_db`].
///
/// # Errors
/// Any drawing or file error, as text.
pub fn write_svg(path: &Path, channels: &[ChannelAnalysis], energy_db: &[Vec<Vec<f64>>]) -> Result<(), String> {
    let cols = 3usize;
    let per_channel = channels.first().map_or(1, |c| 1 + c.bands.len());
    let rows_per_channel = per_channel.div_ceil(cols);
    let rows = rows_per_channel * channels.len().max(1);
    let (w, h) = (1200u32, 300 * rows as u32 + 40);
    let root = SVGBackend::new(path, (w, h)).into_drawing_area();
    let err = |e: &dyn std::fmt::Display| format!("{}: cannot draw the plot: {e}", path.display());
    root.fill(&WHITE).map_err(|e| err(&e))?;
    let root = root
        .titled("Partita: energy decay per band (time from each band's onset)", ("sans-serif", 20))
        .map_err(|e| err(&e))?;
    let panels = root.split_evenly((rows, cols));
    for (ci, ch) in channels.iter().enumerate() {
        let fs = ch.sample_rate_hz;
        let bands: Vec<&BandAnalysis> = std::iter::once(&ch.broadband).chain(&ch.bands).collect();
        for (bi, b) in bands.iter().enumerate() {
            let panel = &panels[ci * rows_per_channel * cols + bi];
            let t_end = (b.edc_db.len() as f64 / fs).max(1.0 / fs);
            let mut chart = ChartBuilder::on(panel)
                .caption(format!("channel {ci}, {}", band_label(b)), ("sans-serif", 14))
                .margin(8)
                .x_label_area_size(28)
                .y_label_area_size(40)
                .build_cartesian_2d(0.0..t_end, FLOOR_DB..5.0)
                .map_err(|e| err(&e))?;
            chart.configure_mesh().x_desc("s").y_desc("dB").draw().map_err(|e| err(&e))?;
            let clamp = |v: f64| if v.is_finite() { v.max(FLOOR_DB) } else { FLOOR_DB };
            // The first panel carries the legend for all of them.
            let legend = ci == 0 && bi == 0;
            let grey = RGBColor(170, 170, 170);
            if let Some(energy) = energy_db.get(ci).and_then(|c| c.get(bi)) {
                let step = SMOOTH_S;
                let pts = energy.iter().enumerate().map(|(i, &v)| (i as f64 * step, clamp(v)));
                let drawn = chart.draw_series(LineSeries::new(pts, grey)).map_err(|e| err(&e))?;
                if legend {
                    drawn
                        .label("energy, 10 ms mean")
                        .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], grey));
                }
            }
            if let Some(noise) = b.noise {
                let level = clamp(noise.level_db);
                let drawn = chart
                    .draw_series(DashedLineSeries::new(vec![(0.0, level), (t_end, level)], 6, 4, BLACK.stroke_width(1)))
                    .map_err(|e| err(&e))?;
                if legend {
                    drawn
                        .label("noise floor (dotted: crossing point)")
                        .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], BLACK));
                }
                let tc = noise.crossing_frames as f64 / fs;
                chart
                    .draw_series(DashedLineSeries::new(vec![(tc, FLOOR_DB), (tc, 5.0)], 2, 3, BLACK.stroke_width(1)))
                    .map_err(|e| err(&e))?;
            }
            let stride = (b.edc_db.len() / 600).max(1);
            let edc = b.edc_db.iter().enumerate().step_by(stride).map(|(i, &v)| (i as f64 / fs, clamp(v)));
            let drawn = chart.draw_series(LineSeries::new(edc, BLUE.stroke_width(2))).map_err(|e| err(&e))?;
            if legend {
                drawn
                    .label("Schroeder decay, compensated")
                    .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], BLUE.stroke_width(2)));
            }
            for (p, name, color) in [
                (Parameter::Edt, "EDT fit", RGBColor(230, 140, 0)),
                (Parameter::T20, "T20 fit", RGBColor(0, 150, 0)),
                (Parameter::T30, "T30 fit", RGBColor(210, 0, 0)),
            ] {
                if let Some(fit) = b.get(p).fit {
                    let y = |t: f64| fit.intercept_db + fit.slope_db_per_s * t;
                    let line = vec![(fit.start_s, clamp(y(fit.start_s))), (fit.end_s, clamp(y(fit.end_s)))];
                    let drawn = chart.draw_series(LineSeries::new(line, color.stroke_width(2))).map_err(|e| err(&e))?;
                    if legend {
                        drawn
                            .label(name)
                            .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 16, y)], color.stroke_width(2)));
                    }
                }
            }
            if legend {
                chart
                    .configure_series_labels()
                    .position(SeriesLabelPosition::UpperRight)
                    .background_style(WHITE.mix(0.85))
                    .border_style(BLACK)
                    .label_font(("sans-serif", 11))
                    .draw()
                    .map_err(|e| err(&e))?;
            }
        }
    }
    root.present().map_err(|e| err(&e))?;
    Ok(())
}
