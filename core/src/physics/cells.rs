//! Shock-cell spacing from the vortex-sheet model.
//!
//! - Round jet (Prandtl 1904; Pack 1950; higher modes Tam, Jackson & Seiner 1985):
//!   `Ls_n = pi sqrt(Mj^2 - 1) Dj / j0,n`.
//! - Planar jet of height hj: `Ls_n = 2 hj sqrt(Mj^2 - 1) / (2n - 1)`.
//! - Rectangular jet hj x bj (Tam 1988): `Ls = 2 sqrt(Mj^2 - 1) / sqrt(1/hj^2 + 1/bj^2)`; higher
//!   modes across the height `Ls_n = 2 sqrt(Mj^2-1) / sqrt(((2n-1)/hj)^2 + (1/bj)^2)`, which
//!   tends to the planar modes as bj grows.
//!
//! Measured cells are shorter than the vortex-sheet value and shorten downstream; the
//! `spacing_factor` (default 1; Tam, Seiner & Yu 1986 use 0.8) scales every spacing and is
//! reported with the result.

use super::bessel;
use super::bounds::{Bounds, RangeError, Setting};
use super::jet::{ExpandedJet, JetSize};
use std::f64::consts::PI;

/// Allowed spacing factor.
pub const SPACING_FACTOR: Bounds = Bounds::open_closed(0.0, 2.0, "");
/// Allowed number of waveguide modes.
pub const MODES: Bounds = Bounds::closed(1.0, bessel::CACHED_ZEROS as f64, "");
/// Allowed number of shock positions.
pub const SHOCKS: Bounds = Bounds::closed(1.0, 1000.0, "");

/// Options of the spacing model.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CellOptions {
    factor: f64,
    modes: u32,
    shocks: u32,
}

/// Spacing factor when none is given: the pure vortex-sheet spacing.
pub const DEFAULT_SPACING_FACTOR: f64 = 1.0;
/// Shock positions listed when no count is given.
pub const DEFAULT_SHOCKS: u32 = 8;

impl CellOptions {
    /// Factor on every vortex-sheet spacing (for the shortening of real cells; Tam, Seiner &
    /// Yu 1986 use 0.8): 1 when unset, the pure vortex-sheet spacing.
    pub const SPACING_FACTOR: Setting =
        Setting::new("spacing_factor", SPACING_FACTOR, DEFAULT_SPACING_FACTOR, "pure vortex-sheet spacing");
    /// Shock positions listed.
    pub const SHOCK_COUNT: Setting =
        Setting::new("shock_count", SHOCKS, DEFAULT_SHOCKS as f64, "the first shocks");
}

impl Default for CellOptions {
    fn default() -> Self {
        Self { factor: DEFAULT_SPACING_FACTOR, modes: 1, shocks: DEFAULT_SHOCKS }
    }
}

impl CellOptions {
    /// Spacing factor in (0, 2], number of modes in [1, 20], number of shock positions in
    /// [1, 1000].
    ///
    /// # Errors
    /// [`RangeError`] naming `spacing_factor`, `modes` or `shock_count`.
    pub fn new(factor: f64, modes: u32, shocks: u32) -> Result<Self, RangeError> {
        Ok(Self {
            factor: SPACING_FACTOR.check("spacing_factor", factor)?,
            modes: MODES.check("modes", f64::from(modes))? as u32,
            shocks: SHOCKS.check("shock_count", f64::from(shocks))? as u32,
        })
    }

    /// Spacing factor.
    pub fn factor(&self) -> f64 {
        self.factor
    }
}

/// One waveguide mode.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CellMode {
    /// Mode number n (1 = fundamental).
    pub n: u32,
    /// Vortex-sheet spacing, m.
    pub vortex_sheet_m: f64,
    /// Spacing after the factor, m.
    pub spacing_m: f64,
    /// Bessel zero j0,n (round jets).
    pub bessel_zero: Option<f64>,
}

/// Spacing of every mode and the axial positions of the first shocks.
#[derive(Debug, Clone, PartialEq)]
pub struct Cells {
    /// Spacing factor used.
    pub factor: f64,
    /// Modes 1..=n.
    pub modes: Vec<CellMode>,
    /// Ends of the first cells (fundamental mode, factor applied), m from the nozzle exit.
    pub shock_positions_m: Vec<f64>,
}

impl Cells {
    /// Spacing of the fundamental mode with the factor applied, m.
    pub fn spacing_m(&self) -> f64 {
        self.modes[0].spacing_m
    }
}

/// Vortex-sheet spacing of mode `n` (>= 1) without the factor, m. Round jets need `zero`, the
/// n-th zero of J0.
pub fn vortex_sheet_spacing(jet: &ExpandedJet, n: u32, zero: f64) -> f64 {
    let b = jet.beta();
    let k = f64::from(2 * n - 1);
    match jet.size {
        JetSize::Round { diameter_m } => PI * b * diameter_m / zero,
        JetSize::Planar { height_m } => 2.0 * height_m * b / k,
        JetSize::Rectangular { height_m, width_m } => {
            2.0 * b / ((k / height_m).powi(2) + (1.0 / width_m).powi(2)).sqrt()
        }
    }
}

/// Fundamental vortex-sheet spacing times `factor`, m.
pub fn spacing(jet: &ExpandedJet, factor: f64) -> f64 {
    factor * vortex_sheet_spacing(jet, 1, bessel::j01())
}

/// Shock-cell spacing and positions for a supersonic jet.
pub fn cells(jet: &ExpandedJet, opts: &CellOptions) -> Cells {
    let round = matches!(jet.size, JetSize::Round { .. });
    let zeros: &[f64] = if round { &bessel::j0_zeros_cached()[..opts.modes as usize] } else { &[] };
    let modes: Vec<CellMode> = (1..=opts.modes)
        .map(|n| {
            let zero = zeros.get(n as usize - 1).copied();
            let ls = vortex_sheet_spacing(jet, n, zero.unwrap_or(f64::NAN));
            CellMode { n, vortex_sheet_m: ls, spacing_m: opts.factor * ls, bessel_zero: zero }
        })
        .collect();
    let ls = modes[0].spacing_m;
    let shock_positions_m = (1..=opts.shocks).map(|k| f64::from(k) * ls).collect();
    Cells { factor: opts.factor, modes, shock_positions_m }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::physics::gas::Gas;

    fn jet(size: JetSize, mj: f64) -> ExpandedJet {
        ExpandedJet::direct(Gas::AIR, Gas::AIR, mj, size, 288.15, 288.15).unwrap()
    }

    fn rel(a: f64, b: f64) -> f64 {
        ((a - b) / b).abs()
    }

    #[test]
    fn round_jet_is_pack_constant_times_beta_dj() {
        // Ls = 1.306 sqrt(Mj^2 - 1) Dj (Prandtl-Pack; Pack 1950, constant pi / j0,1).
        let j = jet(JetSize::Round { diameter_m: 0.02 }, 1.5);
        let c = cells(&j, &CellOptions::new(1.0, 3, 4).unwrap());
        assert!(rel(c.spacing_m(), 1.306 * (1.25f64).sqrt() * 0.02) < 5e-4);
        // Modes shorten with j0,n.
        assert!(c.modes[1].spacing_m < c.modes[0].spacing_m);
        assert!(rel(c.modes[1].spacing_m, PI * 1.25f64.sqrt() * 0.02 / 5.520_078_110_286_311) < 1e-13);
        assert!(rel(c.shock_positions_m[3], 4.0 * c.spacing_m()) < 1e-15);
    }

    #[test]
    fn rectangular_tends_to_planar_and_to_a_square_value() {
        // Closed forms of Tam (1988): width -> infinity gives 2 hj beta; aspect ratio 1 gives
        // 2 hj beta / sqrt(2) = sqrt(2) hj beta.
        let b = (1.4f64 * 1.4 - 1.0).sqrt();
        let planar = jet(JetSize::Planar { height_m: 0.01 }, 1.4);
        let wide = jet(JetSize::Rectangular { height_m: 0.01, width_m: 1e4 * 0.01 }, 1.4);
        let square = jet(JetSize::Rectangular { height_m: 0.01, width_m: 0.01 }, 1.4);
        let o = CellOptions::new(1.0, 3, 1).unwrap();
        let (cp, cw, cs) = (cells(&planar, &o), cells(&wide, &o), cells(&square, &o));
        assert!(rel(cp.spacing_m(), 2.0 * 0.01 * b) < 1e-15);
        assert!(rel(cw.spacing_m(), cp.spacing_m()) < 1e-8);
        assert!(rel(cw.modes[2].spacing_m, cp.modes[2].spacing_m) < 1e-7);
        assert!(rel(cs.spacing_m(), 2f64.sqrt() * 0.01 * b) < 1e-15);
        // Planar modes are Ls / (2n - 1).
        assert!(rel(cp.modes[1].spacing_m, cp.spacing_m() / 3.0) < 1e-15);
    }

    #[test]
    fn spacing_grows_monotonically_with_mj() {
        let o = CellOptions::default();
        let mut last = 0.0;
        for k in 1..200 {
            let mj = 1.0 + 0.01 * f64::from(k);
            let s = cells(&jet(JetSize::Round { diameter_m: 0.02 }, mj), &o).spacing_m();
            assert!(s > last);
            last = s;
        }
    }

    #[test]
    fn factor_scales_every_spacing() {
        let j = jet(JetSize::Round { diameter_m: 0.02 }, 1.5);
        let a = cells(&j, &CellOptions::new(1.0, 2, 2).unwrap());
        let b = cells(&j, &CellOptions::new(0.8, 2, 2).unwrap());
        assert!(rel(b.modes[1].spacing_m, 0.8 * a.modes[1].spacing_m) < 1e-15);
        assert_eq!(b.modes[1].vortex_sheet_m, a.modes[1].vortex_sheet_m);
        assert_eq!(CellOptions::new(0.0, 1, 1).unwrap_err().quantity, "spacing_factor");
        assert_eq!(CellOptions::new(1.0, 21, 1).unwrap_err().quantity, "modes");
        assert_eq!(CellOptions::new(1.0, 1, 1001).unwrap_err().quantity, "shock_count");
    }
}
