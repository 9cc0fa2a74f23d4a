//! Request pieces shared by the end-to-end tests and the benchmarks: nozzles, jet conditions
//! at a pressure ratio (cold, ISA ambient unless changed), jet inputs, sweeps, staging points,
//! the tracking stream's first message, and relative error.

use crate::samples::{f32_pascals, track_start, welch_segment};
use jetloop_proto::pb::{self, jet_input::Source, nozzle::Kind, operating_point::Pressure};

/// |a - b| / |b|.
pub fn rel(a: f64, b: f64) -> f64 {
    ((a - b) / b).abs()
}

/// A round convergent nozzle of exit diameter `d` m.
pub fn round(d: f64) -> Kind {
    Kind::RoundConvergent(pb::RoundConvergentNozzle { exit_diameter_m: d })
}

/// A round convergent-divergent nozzle of exit diameter `d` m and design Mach `md`.
pub fn cd(d: f64, md: f64) -> Kind {
    Kind::RoundConvergentDivergent(pb::RoundConvergentDivergentNozzle {
        exit_diameter_m: d,
        design: Some(pb::round_convergent_divergent_nozzle::Design::DesignMachNumber(md)),
    })
}

/// Conditions naming only the nozzle `kind`: no operating point (a stage fit's jet, whose
/// points carry the pressure ratio), every other field left to the server.
pub fn nozzle_only(kind: Kind) -> pb::JetConditions {
    pb::JetConditions { nozzle: Some(pb::Nozzle { kind: Some(kind) }), ..Default::default() }
}

/// Conditions of nozzle `kind` at NPR `npr`, every other field left to the server.
pub fn conditions(kind: Kind, npr: f64) -> pb::JetConditions {
    pb::JetConditions {
        operating_point: Some(pb::OperatingPoint {
            pressure: Some(Pressure::NozzlePressureRatio(npr)),
            ..Default::default()
        }),
        ..nozzle_only(kind)
    }
}

/// As [`conditions`], with the reservoir (total) temperature `t0` K given.
pub fn conditions_at(kind: Kind, npr: f64, t0: f64) -> pb::JetConditions {
    let mut c = conditions(kind, npr);
    if let Some(op) = c.operating_point.as_mut() {
        op.total_temperature_k = Some(t0);
    }
    c
}

/// The jet input of conditions.
pub fn input(c: pb::JetConditions) -> pb::JetInput {
    pb::JetInput { source: Some(Source::Conditions(c)) }
}

/// A 25.4 mm round convergent nozzle at NPR `npr` as a jet input.
pub fn inch_nozzle(npr: f64) -> pb::JetInput {
    input(conditions(round(0.0254), npr))
}

/// A cold round jet given directly: fully expanded Mach number `mj` and diameter `dj` m,
/// temperatures and gases left to the server.
pub fn fully_expanded(mj: f64, dj: f64) -> pb::FullyExpandedJet {
    pb::FullyExpandedJet {
        fully_expanded_mach_number: mj,
        size: Some(pb::fully_expanded_jet::Size::FullyExpandedDiameterM(dj)),
        ..Default::default()
    }
}

/// The jet input of a jet given directly.
pub fn expanded_input(j: pb::FullyExpandedJet) -> pb::JetInput {
    pb::JetInput { source: Some(Source::FullyExpanded(j)) }
}

/// A cold round jet given directly: Mj and Dj in m.
pub fn direct(mj: f64, dj: f64) -> pb::JetInput {
    expanded_input(fully_expanded(mj, dj))
}

/// A screech sweep of `jet` over `count` nozzle pressure ratios from `start` to `stop`,
/// every option left to the server.
pub fn npr_sweep(jet: pb::JetInput, start: f64, stop: f64, count: u32) -> pb::SweepScreechRequest {
    pb::SweepScreechRequest {
        jet: Some(jet),
        variable: pb::SweepVariable::NozzlePressureRatio as i32,
        values: Some(pb::sweep_screech_request::Values::Range(pb::SweepRange { start, stop, count })),
        options: None,
    }
}

/// A measured tone of a stage fit: frequency `f` Hz at control value `x`, nothing else.
pub fn point(x: f64, f: f64) -> pb::MeasuredTone {
    pb::MeasuredTone { x, frequency_hz: f, ..Default::default() }
}

/// `m` points of a pressure sweep: six stages over NPR 2.2-5.0 whose frequencies follow
/// a smooth trend with 12 % jumps (synthetic, for timing and load only).
pub fn pressure_sweep_points(m: usize) -> Vec<pb::MeasuredTone> {
    (0..m)
        .map(|k| {
            let npr = 2.2 + 2.8 * k as f64 / m as f64;
            let stage = (6 * k / m) as i32;
            point(npr, 6000.0 / (npr - 1.0) * 1.12f64.powi(stage % 2 * 2 - 1 + stage / 2))
        })
        .collect()
}

/// The first message of a tracking stream: f32 frames of one channel at `fs` Hz already in
/// pascals, Welch segments of `segment` samples, an update every `update_s` s; every other
/// setting left to the server.
pub fn track_config(fs: f64, segment: u32, update_s: f64) -> pb::TrackRequest {
    track_start(pb::TrackConfig {
        analysis: Some(pb::ExtractTonesRequest {
            samples: Some(f32_pascals(Vec::new(), fs, 0)),
            welch: Some(welch_segment(segment)),
            ..Default::default()
        }),
        update_interval_s: Some(update_s),
        ..Default::default()
    })
}
