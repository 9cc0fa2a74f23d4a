//! The SVG charts of responses: screech map, shock cells, shock-noise directivity, PSD, band
//! levels, dispersion curves and stage fits (drawn with [`super::plot`]).

use crate::render::plot::Axis;
use crate::render::plot::Marker;
use crate::render::plot::Plot;
use crate::render::plot::COLOURS;
use crate::render::rows::mode_label;
use jetloop_proto::pb;

/// The screech map of a sweep: models as lines, guided-mode bands shaded (one band per run of
/// consecutive points where the mode has one), closure tones of the first shock-cell mode as
/// dots and of the second as rings.
pub fn sweep_plot(r: &pb::SweepScreechResponse, x_label: &str) -> String {
    use super::plot::{Axis, Marker, Plot, COLOURS};
    let pts: Vec<&pb::SweepPoint> = r.points.iter().filter(|p| p.supersonic).collect();
    let xs = pts.iter().map(|p| p.value);
    let (xlo, xhi) = xs.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(v), b.max(v)));
    let (xlo, xhi) = if xlo.is_finite() && xhi > xlo { (xlo, xhi) } else { (0.0, 1.0) };
    let mut ymax = 0.0_f64;
    for p in &pts {
        for v in p.powell_fundamental_hz.iter().chain(p.tam_1986_hz.iter()) {
            ymax = ymax.max(*v);
        }
        for m in &p.guided_modes {
            for t in m.tones.iter().filter_map(|t| t.tone.as_ref()) {
                ymax = ymax.max(t.frequency_hz.unwrap_or(0.0));
            }
        }
    }
    let ymax = if ymax > 0.0 { ymax * 1.15 } else { 1.0 };
    let mut p = Plot::new(
        "Screech map",
        900.0,
        560.0,
        Axis::linear(xlo, xhi, x_label),
        Axis::linear(0.0, ymax, "frequency [Hz]"),
    );
    let modes = pts.iter().map(|q| q.guided_modes.len()).max().unwrap_or(0);
    for i in 0..modes {
        let colour = COLOURS[(i + 2) % COLOURS.len()];
        let name = pts
            .iter()
            .find_map(|q| q.guided_modes.get(i))
            .map(|m| {
                let id = m.mode.as_ref().map(mode_label).unwrap_or_default();
                if m.customary_stage.is_empty() {
                    id
                } else {
                    format!("{id} ({})", m.customary_stage)
                }
            })
            .unwrap_or_default();
        // Runs of consecutive points with a band.
        let mut labelled = false;
        let mut run: Vec<(f64, f64, f64)> = Vec::new();
        let flush = |p: &mut Plot, run: &mut Vec<(f64, f64, f64)>, labelled: &mut bool| {
            if run.len() >= 2 {
                let lo: Vec<(f64, f64)> = run.iter().map(|r| (r.0, r.1)).collect();
                let hi: Vec<(f64, f64)> = run.iter().map(|r| (r.0, r.2)).collect();
                let label = format!("{name} band");
                p.band(&lo, &hi, colour, if *labelled { None } else { Some(label.as_str()) });
                *labelled = true;
            }
            run.clear();
        };
        for q in &pts {
            let band = q.guided_modes.get(i).filter(|m| m.has_band).and_then(|m| {
                let lo = m.branch_point.as_ref()?.frequency_hz?;
                let hi = m.saddle_point.as_ref()?.frequency_hz?;
                Some((q.value, lo, hi))
            });
            match band {
                Some(b) => run.push(b),
                None => flush(&mut p, &mut run, &mut labelled),
            }
        }
        flush(&mut p, &mut run, &mut labelled);
        for (n, marker) in [(1, Marker::Dot), (2, Marker::Ring)] {
            let tones: Vec<(f64, f64)> = pts
                .iter()
                .filter_map(|q| {
                    let t = q.guided_modes.get(i)?.tones.iter().find(|t| t.cell_mode == n)?;
                    Some((q.value, t.tone.as_ref()?.frequency_hz?))
                })
                .collect();
            let label = format!("{name} closure, cell mode {n}");
            p.markers(&tones, colour, marker, (!tones.is_empty()).then_some(label.as_str()));
        }
    }
    let line = |f: &dyn Fn(&pb::SweepPoint) -> Option<f64>| -> Vec<(f64, f64)> {
        pts.iter().filter_map(|q| f(q).map(|v| (q.value, v))).collect()
    };
    p.line(&line(&|q| q.powell_fundamental_hz), COLOURS[0], false, Some("Powell fundamental"));
    let tam = line(&|q| q.tam_1986_hz);
    if !tam.is_empty() {
        p.line(&tam, COLOURS[1], true, Some("Tam, Seiner & Yu 1986"));
    }
    p.finish()
}

/// Shock positions along the jet axis (x in m and x / L), one marker per shock, with the cell
/// boundaries drawn down to the axis.
pub fn cells_plot(r: &pb::CellSpacingResponse) -> String {
    use super::plot::{Axis, Marker, Plot, COLOURS};
    let xs: Vec<f64> = r.shocks.iter().map(|s| s.axial_position_m).collect();
    let xmax = xs.iter().copied().fold(0.0, f64::max).max(1e-6);
    let mut p = Plot::new(
        "Shock positions along the jet (vortex-sheet spacing, fundamental mode)",
        900.0,
        320.0,
        Axis::linear(0.0, xmax * 1.05, "axial distance from the nozzle exit x [m]"),
        Axis::linear(0.0, f64::from(u32::try_from(xs.len()).unwrap_or(0)).max(1.0) + 1.0, "shock number"),
    );
    let pts: Vec<(f64, f64)> = r.shocks.iter().map(|s| (s.axial_position_m, f64::from(s.index))).collect();
    for &(x, n) in &pts {
        p.line(&[(x, 0.0), (x, n)], "#bbb", true, None);
        p.label(
            x,
            n,
            &format!("{:.1} L", x / r.jet.as_ref().map_or(1.0, |j| j.reference_length_m.max(1e-12))),
            COLOURS[0],
        );
    }
    p.markers(&pts, COLOURS[0], Marker::Dot, Some("shock (x and x / L, L the fully expanded size)"));
    p.finish()
}

/// Shock-associated noise peak frequency against observer angle, one series per mode.
pub fn shock_noise_plot(r: &pb::PredictShockNoiseResponse) -> String {
    use super::plot::{Axis, Marker, Plot, COLOURS};
    let f: Vec<f64> = r.peaks.iter().filter_map(|p| p.peak_frequency_hz).collect();
    let (fmin, fmax) = (f.iter().copied().fold(f64::MAX, f64::min), f.iter().copied().fold(0.0, f64::max));
    let (fmin, fmax) = if fmax > 0.0 { (fmin, fmax) } else { (0.0, 1.0) };
    let mut p = Plot::new(
        "Shock-associated noise peak against observer angle",
        900.0,
        480.0,
        Axis::linear(0.0, 180.0, "observer angle from the downstream jet axis [deg]"),
        Axis::linear(fmin * 0.9, fmax * 1.1, "peak frequency [Hz]"),
    );
    let mut modes: Vec<u32> = r.peaks.iter().map(|p| p.mode).collect();
    modes.sort_unstable();
    modes.dedup();
    for (k, m) in modes.iter().enumerate() {
        let pts: Vec<(f64, f64)> = r
            .peaks
            .iter()
            .filter(|p| p.mode == *m)
            .filter_map(|p| p.peak_frequency_hz.map(|f| (p.observer_angle_deg, f)))
            .collect();
        let c = COLOURS[k % COLOURS.len()];
        p.line(&pts, c, false, None);
        p.markers(&pts, c, Marker::Dot, Some(&format!("shock-cell mode {m}")));
    }
    p.finish()
}

/// One-third-octave band levels against band centre (log frequency), a series per channel,
/// each band's level and, dashed, its A-weighted level.
pub fn bands_plot(title: &str, channels: &[pb::ChannelBands]) -> String {
    use super::plot::{Axis, Marker, Plot, COLOURS};
    let all = || channels.iter().filter_map(|c| c.bands.as_ref()).flat_map(|b| b.bands.iter());
    let (fmin, fmax) = all().fold((f64::MAX, 0.0f64), |(a, b), x| (a.min(x.exact_hz), b.max(x.exact_hz)));
    let (lmin, lmax) = all()
        .flat_map(|x| [x.level_db, x.a_weighted_level_db])
        .filter(|v| v.is_finite())
        .fold((f64::MAX, f64::MIN), |(a, b), v| (a.min(v), b.max(v)));
    if fmax <= 0.0 || lmax < lmin {
        return String::from("<svg xmlns=\"http://www.w3.org/2000/svg\"/>");
    }
    let mut p = Plot::new(
        &format!("One-third-octave band levels (IEC 61260-1), {title}"),
        900.0,
        480.0,
        Axis::log(fmin / 1.2, fmax * 1.2, "band centre frequency [Hz]"),
        Axis::linear(lmin.max(lmax - 80.0), lmax + 3.0, "band level [dB re 20 uPa]"),
    );
    for (k, c) in channels.iter().enumerate() {
        let Some(b) = &c.bands else { continue };
        let name = if c.name.is_empty() { format!("channel {}", c.channel) } else { c.name.clone() };
        let colour = COLOURS[k % COLOURS.len()];
        let lin: Vec<(f64, f64)> = b.bands.iter().map(|x| (x.exact_hz, x.level_db)).collect();
        let aw: Vec<(f64, f64)> = b.bands.iter().map(|x| (x.exact_hz, x.a_weighted_level_db)).collect();
        p.line(&lin, colour, false, None);
        p.markers(&lin, colour, Marker::Dot, Some(&format!("{name}, dB re 20 uPa")));
        p.line(&aw, colour, true, Some(&format!("{name}, A-weighted, dB(A)")));
    }
    p.finish()
}

/// An SVG plot of PSDs in dB re (20 uPa)^2/Hz against frequency (logarithmic, or linear with
/// `linear`): one channel with its floor, or several overlaid in one colour each. Tones are
/// marked at their peak density and labelled with their frequency and their level in
/// dB re 20 uPa (the tone's power summed over its bins, so it sits above the density curve).
pub fn svg_plot(
    title: &str,
    channels: &[(String, &pb::PsdData, &[pb::ExtractedTone])],
    linear: bool,
) -> String {
    let db = |d: f64| 10.0 * (d.max(1e-30) / 4e-10).log10();
    let series = |p: &pb::PsdData, ys: &[f64]| -> Vec<(f64, f64)> {
        p.frequency_hz.iter().zip(ys).filter(|(f, _)| **f > 0.0).map(|(f, d)| (*f, db(*d))).collect()
    };
    let all: Vec<Vec<(f64, f64)>> =
        channels.iter().map(|(_, p, _)| series(p, &p.density_pa2_per_hz)).collect();
    let flat = || all.iter().flatten();
    let (Some(fmin), Some(fmax)) =
        (flat().map(|p| p.0).min_by(f64::total_cmp), flat().map(|p| p.0).max_by(f64::total_cmp))
    else {
        return String::from("<svg xmlns=\"http://www.w3.org/2000/svg\"/>");
    };
    let ymax = flat().map(|p| p.1).fold(f64::MIN, f64::max) + 5.0;
    let ymin = flat().map(|p| p.1).fold(f64::MAX, f64::min);
    let x = if linear {
        Axis::linear(0.0, fmax, "frequency [Hz]")
    } else {
        Axis::log(fmin, fmax, "frequency [Hz]")
    };
    let mut plot = Plot::new(
        &format!("PSD, {title}"),
        900.0,
        480.0,
        x,
        Axis::linear(ymin, ymax, "PSD [dB re (20 uPa)^2/Hz]"),
    );
    let one = channels.len() == 1;
    for (k, ((label, p, tones), pts)) in channels.iter().zip(&all).enumerate() {
        let c = COLOURS[k % COLOURS.len()];
        plot.line(pts, c, false, Some(&if one { "PSD".to_string() } else { format!("{label} PSD") }));
        if one {
            let floor = series(p, &p.floor_pa2_per_hz);
            if !floor.is_empty() {
                plot.line(&floor, "#999", true, Some("broadband floor (running median)"));
            }
        }
        let shown: Vec<&pb::ExtractedTone> =
            tones.iter().filter(|t| t.frequency_hz >= fmin && t.frequency_hz <= fmax).collect();
        let marks: Vec<(f64, f64)> =
            shown.iter().map(|t| (t.frequency_hz, db(t.peak_density_pa2_per_hz))).collect();
        let mark_colour = if one { COLOURS[1] } else { c };
        let legend =
            if one { "tones: Hz, tone level in dB re 20 uPa".to_string() } else { format!("{label} tones") };
        plot.markers(&marks, mark_colour, Marker::Ring, Some(&legend));
        for t in shown {
            plot.label(
                t.frequency_hz,
                db(t.peak_density_pa2_per_hz),
                &format!("{:.0} Hz, {:.1} dB", t.frequency_hz, t.level_db),
                mark_colour,
            );
        }
    }
    plot.finish()
}

/// Dispersion curves St against k L: upstream parts solid, the rest dashed; branch and saddle
/// points marked; the sonic line dotted; closure tones as dots.
pub(crate) fn dispersion_plot(r: &pb::GuidedModesResponse, sheet: &pb::VortexSheetParameters) -> String {
    let pts = r.modes.iter().flat_map(|m| m.curve.iter());
    let (mut kmin, mut smax) = (0.0_f64, 0.0_f64);
    for p in pts {
        kmin = kmin.min(p.wavenumber_times_length);
        smax = smax.max(p.strouhal_number);
    }
    let smax = (smax * 1.1).max(0.1);
    let kmin = (kmin * 1.05).min(-0.1);
    let x = Axis::linear(kmin, 0.0, "axial wavenumber k L (L = Dj or hj; negative: upstream phase)");
    let y = Axis::linear(0.0, smax, "Strouhal number f L / Uj");
    let mut p = Plot::new("Guided jet modes of the vortex sheet", 860.0, 560.0, x, y);
    // Sonic line k = -omega / a_ambient: k L = -2 pi Mj St / (a/aj).
    let slope = -2.0 * std::f64::consts::PI * sheet.fully_expanded_mach_number / sheet.sound_speed_ratio;
    let st_end = (kmin / slope).min(smax);
    p.line(&[(0.0, 0.0), (slope * st_end, st_end)], "#555", true, Some("sonic line k = -omega/a"));
    for (i, m) in r.modes.iter().enumerate() {
        let colour = COLOURS[i % COLOURS.len()];
        let id = m.mode.as_ref().map(mode_label).unwrap_or_default();
        let up: Vec<(f64, f64)> = m
            .curve
            .iter()
            .filter(|q| q.upstream)
            .map(|q| (q.wavenumber_times_length, q.strouhal_number))
            .collect();
        let down: Vec<(f64, f64)> = m
            .curve
            .iter()
            .filter(|q| !q.upstream)
            .map(|q| (q.wavenumber_times_length, q.strouhal_number))
            .collect();
        let label =
            if m.customary_stage.is_empty() { id.clone() } else { format!("{id} ({})", m.customary_stage) };
        if up.len() >= 2 {
            p.line(&up, colour, false, Some(&format!("{label}: upstream band")));
            p.line(&down, colour, true, None);
        } else {
            p.line(&down, colour, true, Some(&format!("{label}: no band")));
        }
        let marks: Vec<(f64, f64)> = m
            .branch_point
            .iter()
            .chain(m.saddle_point.iter())
            .map(|q| (q.wavenumber_times_length, q.strouhal_number))
            .collect();
        p.markers(&marks, colour, Marker::Ring, None);
        let tones: Vec<(f64, f64)> = m
            .tones
            .iter()
            .filter_map(|t| t.tone.as_ref())
            .map(|q| (q.wavenumber_times_length, q.strouhal_number))
            .collect();
        p.markers(&tones, colour, Marker::Dot, None);
    }
    p.finish()
}

/// Frequency against x, one colour per stage, up-sweep points as upward and down-sweep points
/// as downward triangles (hysteresis shows as two colours at one x), model frequencies as
/// crosses, jumps as dashed segments.
pub(crate) fn stages_plot(points: &[pb::MeasuredTone], r: &pb::FitStagesResponse, x_label: &str) -> String {
    let xs = || points.iter().map(|p| p.x);
    let fs =
        || points.iter().map(|p| p.frequency_hz).chain(r.points.iter().filter_map(|p| p.model_frequency_hz));
    let (x0, x1) = (xs().fold(f64::MAX, f64::min), xs().fold(f64::MIN, f64::max));
    let (f0, f1) = (fs().fold(f64::MAX, f64::min), fs().fold(f64::MIN, f64::max));
    let mut plot = Plot::new(
        "Tone frequency by stage",
        900.0,
        520.0,
        Axis::linear(x0, x1, x_label),
        Axis::linear(f0 * 0.97, f1 * 1.03, "frequency [Hz]"),
    );
    for st in &r.stages {
        let c = COLOURS[st.stage as usize % COLOURS.len()];
        let label = match st.loop_order {
            Some(n) => format!("stage {} (n = {n})", st.stage),
            None => format!("stage {}", st.stage),
        };
        for (dir, marker) in [
            (pb::SweepDirection::Increasing, Marker::Up),
            (pb::SweepDirection::Decreasing, Marker::Down),
            (pb::SweepDirection::Unspecified, Marker::Dot),
        ] {
            let pts: Vec<(f64, f64)> = points
                .iter()
                .zip(&r.points)
                .filter(|(_, res)| res.stage == st.stage && res.direction == dir as i32)
                .map(|(p, _)| (p.x, p.frequency_hz))
                .collect();
            if !pts.is_empty() {
                let dir_name = match dir {
                    pb::SweepDirection::Increasing => ", rising x",
                    pb::SweepDirection::Decreasing => ", falling x",
                    pb::SweepDirection::Unspecified => "",
                };
                plot.markers(&pts, c, marker, Some(&format!("{label}{dir_name}")));
            }
        }
    }
    let model: Vec<(f64, f64)> = points
        .iter()
        .zip(&r.points)
        .filter_map(|(p, res)| res.model_frequency_hz.map(|m| (p.x, m)))
        .collect();
    if !model.is_empty() {
        plot.markers(&model, "#333", Marker::Cross, Some("loop model"));
    }
    for (k, j) in r.jumps.iter().enumerate() {
        let label = (k == 0).then_some("jumps");
        plot.line(
            &[(j.x_before, j.frequency_before_hz), (j.x_after, j.frequency_after_hz)],
            "#555",
            true,
            label,
        );
    }
    plot.finish()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn plot_draws_a_band_line_per_mode_and_the_sonic_line() {
        let pt = |k: f64, st: f64, up: bool| pb::ModePoint {
            strouhal_number: st,
            wavenumber_times_length: k,
            upstream: up,
            ..Default::default()
        };
        let r = pb::GuidedModesResponse {
            modes: vec![pb::GuidedModeResult {
                mode: Some(pb::GuidedModeId {
                    shape: pb::ModeShape::Round as i32,
                    azimuthal_order: 1,
                    radial_order: 1,
                }),
                has_band: true,
                branch_point: Some(pt(-3.0, 0.46, true)),
                saddle_point: Some(pt(-3.3, 0.47, true)),
                curve: vec![
                    pt(-3.0, 0.46, true),
                    pt(-3.3, 0.47, true),
                    pt(-5.0, 0.3, false),
                    pt(-7.0, 0.1, false),
                ],
                customary_stage: "B".into(),
                ..Default::default()
            }],
            ..Default::default()
        };
        let sheet = pb::VortexSheetParameters {
            fully_expanded_mach_number: 1.2,
            sound_speed_ratio: 1.13,
            ..Default::default()
        };
        let svg = dispersion_plot(&r, &sheet);
        assert!(svg.contains("m=1 r1 (B): upstream band"));
        assert!(svg.contains("sonic line"));
        assert_eq!(svg.matches("<polyline").count(), 3);
    }
}
