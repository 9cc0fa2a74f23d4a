//! Neutral guided jet modes of the vortex-sheet model (Tam & Hu 1989, J. Fluid Mech. 201),
//! the bands in which their upstream-travelling branch propagates, and screech closure by
//! wavenumber matching (Gojon, Bogey & Mihaescu 2018; Edgington-Mitchell 2019 review;
//! Mancinelli et al. 2019).
//!
//! # Model
//! A jet of radius R (round) or half-height b (planar) at velocity Uj, sound speed aj and
//! density rho_j in surroundings at sound speed a and density rho_a (pressure-matched).
//! Everything here is dimensionless: lengths in R (or b), speeds in aj, so Uj = M (the fully
//! expanded Mach number), a = c (= a / aj) and s = rho_j / rho_a. A disturbance
//! `exp(i (k x + m theta - omega t))` with k = -kappa < 0 (upstream phase speed) that decays
//! outside the jet (ga^2 = kappa^2 - omega^2 / c^2 > 0) and oscillates inside
//! (lam^2 = (omega + kappa M)^2 - kappa^2 > 0) satisfies, after matching pressure and
//! interface displacement, the pole-free product form
//!
//! `N(lam) + P D(lam) = 0`,  `P = s (omega + kappa M)^2 / omega^2 * Q(ga)`
//!
//! with, for a round jet of azimuthal order m, `N = lam J_m'(lam)`, `D = J_m(lam)`,
//! `Q = -ga K_m'(ga) / K_m(ga)`; for a planar jet `Q = ga` and `N = -lam sin lam`,
//! `D = cos lam` (symmetric) or `N = lam cos lam`, `D = sin lam` (antisymmetric). This is the
//! relation of ../shared/physics.md section 5 divided by `rho_a omega^2 K_m(ga)` (which has no
//! zeros), so it has neither poles nor a vanishing factor.
//!
//! # Curves
//! `N / D` decreases between consecutive zeros of `D`, so each radial order r owns one branch
//! of lam between a zero of `N` (where the relation holds at ga = 0 for Q(0) = 0) and the next
//! zero of `D`. Writing kappa = q omega, with q > 1/c, gives `lam = omega l(q)`,
//! `l(q) = sqrt((1 + q M)^2 - q^2)`, and `P = s (1 + q M)^2 Q(lam sqrt(q^2 - 1/c^2) / l(q))`,
//! which grows with q; for each lam of the branch there is one q, found by bracketing and
//! Brent's method (no unguarded Newton step), and the dispersion curve is
//! `(kappa, omega) = (q lam / l(q), lam / l(q))`.
//!
//! Along a branch, from the **branch point** on the sonic line k = -omega/c (q = 1/c, ga = 0)
//! the frequency rises to a maximum, the **saddle point** d omega / dk = 0, and then falls to
//! zero towards the pole of N/D. Between branch and saddle the group velocity is negative:
//! the mode carries energy upstream, and a screech loop can close through it there only.
//!
//! # Closure
//! A stage closes where the wavenumber of the interaction of the instability wave with the
//! n-th shock-cell mode matches the guided mode: `omega / Uc - k_s,n = k(omega)`, i.e.
//! `kappa(omega) + omega / Uc = k_s,n`. With the sonic line in place of the guided mode this is
//! Powell's `f = Uc / (Ls (1 + Uc/a))` exactly (checked in the tests).

use super::bessel;
use super::bounds::{Bounds, RangeError, Setting};
use super::jet::{ExpandedJet, JetSize};
use super::roots::brent;
use std::f64::consts::PI;

/// Allowed fully expanded Mach number of the solver (the guided modes need a supersonic jet).
pub const MACH: Bounds = Bounds::open_closed(1.0, 5.0, "");
/// Allowed static temperature ratio Tj / Ta (and total T0 / Ta).
pub const TEMPERATURE_RATIO: Bounds = Bounds::closed(0.05, 20.0, "");
/// Allowed sound-speed ratio a_ambient / aj and density ratio rho_j / rho_ambient.
pub const PROPERTY_RATIO: Bounds = Bounds::closed(0.01, 100.0, "");
/// Allowed azimuthal order m of a round-jet mode.
pub const AZIMUTHAL_ORDER: Bounds = Bounds::closed(0.0, 2.0, "");
/// Allowed radial order of a mode.
pub const RADIAL_ORDER: Bounds = Bounds::closed(1.0, 3.0, "");
/// Allowed number of shock-cell modes used for closure.
pub const CELL_MODES: Bounds = Bounds::closed(1.0, 4.0, "");
/// Allowed convection ratio Uc / Uj.
pub const CONVECTION_RATIO: Bounds = Bounds::open_closed(0.0, 1.5, "");
/// Allowed number of points per dispersion curve.
pub const CURVE_POINTS: Bounds = Bounds::closed(0.0, 2000.0, "");

/// Convection ratio Uc / Uj when none is given (Tam 1986; the usual value of the trade).
pub const DEFAULT_CONVECTION_RATIO: f64 = 0.7;
/// Shock-cell modes used for closure when none are given (first and second).
pub const DEFAULT_CELL_MODES: u32 = 2;

/// Shape of a guided mode.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ModeShape {
    /// Round jet, azimuthal order m (0, 1 or 2).
    Round {
        /// Azimuthal order m.
        azimuthal: u32,
    },
    /// Planar jet, pressure symmetric about the mid-plane (varicose).
    PlanarSymmetric,
    /// Planar jet, pressure antisymmetric about the mid-plane (flapping).
    PlanarAntisymmetric,
}

/// One guided mode: its shape and radial order (1 = lowest of that shape).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct GuidedMode {
    /// Shape.
    pub shape: ModeShape,
    /// Radial order r, 1..=3.
    pub radial: u32,
}

impl GuidedMode {
    /// A checked mode.
    ///
    /// # Errors
    /// [`RangeError`] naming `azimuthal_order` or `radial_order`.
    pub fn new(shape: ModeShape, radial: u32) -> Result<Self, RangeError> {
        if let ModeShape::Round { azimuthal } = shape {
            AZIMUTHAL_ORDER.check("azimuthal_order", f64::from(azimuthal))?;
        }
        RADIAL_ORDER.check("radial_order", f64::from(radial))?;
        Ok(Self { shape, radial })
    }

    /// Modes computed when none are asked for: the first radial order of m = 0, 1, 2 and the
    /// second of m = 0 (round); the first two of each symmetry (planar).
    pub fn defaults(round: bool) -> Vec<Self> {
        let g = |shape, radial| Self { shape, radial };
        if round {
            vec![
                g(ModeShape::Round { azimuthal: 0 }, 1),
                g(ModeShape::Round { azimuthal: 1 }, 1),
                g(ModeShape::Round { azimuthal: 2 }, 1),
                g(ModeShape::Round { azimuthal: 0 }, 2),
            ]
        } else {
            vec![
                g(ModeShape::PlanarSymmetric, 1),
                g(ModeShape::PlanarAntisymmetric, 1),
                g(ModeShape::PlanarSymmetric, 2),
                g(ModeShape::PlanarAntisymmetric, 2),
            ]
        }
    }

    /// True for round-jet modes.
    pub fn is_round(&self) -> bool {
        matches!(self.shape, ModeShape::Round { .. })
    }

    /// The stage family in the words of the trade.
    pub fn family(&self) -> &'static str {
        match self.shape {
            ModeShape::Round { azimuthal: 0 } => "axisymmetric",
            ModeShape::Round { azimuthal: 1 } => "flapping or helical (m = 1)",
            ModeShape::Round { .. } => "m = 2",
            ModeShape::PlanarSymmetric => "symmetric (varicose)",
            ModeShape::PlanarAntisymmetric => "antisymmetric (flapping)",
        }
    }

    /// The customary stage letters of cold round convergent-nozzle jets this mode's closure is
    /// associated with, or "" where no letter is customary. First radial order only: A1/A2
    /// (m = 0); for m = 1, B below Mj 1.3, C from 1.3 to 1.6, D above (facility dependent;
    /// Powell 1953, Ponton & Seiner 1992, Raman 1999, from memory).
    pub fn customary_stage(&self, mj: f64) -> &'static str {
        match (self.shape, self.radial) {
            (ModeShape::Round { azimuthal: 0 }, 1) => "A1/A2",
            (ModeShape::Round { azimuthal: 1 }, 1) if mj < 1.3 => "B",
            (ModeShape::Round { azimuthal: 1 }, 1) if mj < 1.6 => "C",
            (ModeShape::Round { azimuthal: 1 }, 1) => "D",
            _ => "",
        }
    }

    /// The branch of lam this mode lives on: from the zero of N where the relation holds on
    /// the sonic line when Q(0) = 0, to the next zero of D (the pole of N/D).
    fn branch(&self) -> (f64, f64) {
        let r = self.radial as usize;
        let z = bessel::order_zeros();
        let rf = self.radial as f64;
        match self.shape {
            // N = lam J0' = -lam J1 vanishes at j1,r; D = J0 at j0,r+1 (the branch below j0,1
            // meets the sonic line only at omega = 0).
            ModeShape::Round { azimuthal: 0 } => (z.of_j[1][r - 1], z.of_j[0][r]),
            ModeShape::Round { azimuthal } => {
                let m = azimuthal as usize;
                (z.of_derivative[m][r - 1], z.of_j[m][r - 1])
            }
            ModeShape::PlanarSymmetric => (rf * PI, (rf + 0.5) * PI),
            ModeShape::PlanarAntisymmetric => ((rf - 0.5) * PI, rf * PI),
        }
    }

    /// (N, D) at lam.
    fn inside(&self, lam: f64) -> (f64, f64) {
        match self.shape {
            ModeShape::Round { azimuthal } => {
                let (j, dj) = bessel::jm_and_derivative(azimuthal, lam);
                (lam * dj, j)
            }
            ModeShape::PlanarSymmetric => {
                let (s, c) = lam.sin_cos();
                (-lam * s, c)
            }
            ModeShape::PlanarAntisymmetric => {
                let (s, c) = lam.sin_cos();
                (lam * c, s)
            }
        }
    }

    /// Q(ga) of the outside field.
    fn outside(&self, ga: f64) -> f64 {
        match self.shape {
            ModeShape::Round { azimuthal } => bessel::k_log_derivative(azimuthal, ga),
            ModeShape::PlanarSymmetric | ModeShape::PlanarAntisymmetric => ga,
        }
    }
}

/// The dimensionless vortex sheet: Mach number M = Uj / aj, c = a_ambient / aj,
/// s = rho_j / rho_ambient.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct VortexSheet {
    mach: f64,
    sound_speed_ratio: f64,
    density_ratio: f64,
}

/// A point of a dispersion curve, dimensionless (lengths in R or b, speeds in aj).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ModePoint {
    /// lam: the radial wavenumber inside the jet.
    pub lam: f64,
    /// Angular frequency omega R / aj.
    pub omega: f64,
    /// kappa = -k R > 0 (the mode's axial wavenumber is k = -kappa).
    pub kappa: f64,
}

/// Where the upstream branch of a mode propagates.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ModeBand {
    /// The mode.
    pub mode: GuidedMode,
    /// Branch point on the sonic line: the lower end of the band.
    pub branch: ModePoint,
    /// Saddle point d omega / dk = 0: the upper end of the band; `None` when the frequency
    /// falls from the branch point on (no upstream-propagating part).
    pub saddle: Option<ModePoint>,
}

impl ModeBand {
    /// True when the mode has a band (saddle above the branch point).
    pub fn has_band(&self) -> bool {
        self.saddle.is_some()
    }

    /// True when omega lies in [branch, saddle].
    pub fn contains(&self, omega: f64) -> bool {
        self.saddle.is_some_and(|s| omega >= self.branch.omega && omega <= s.omega)
    }
}

/// Outcome of closing the loop through one mode with one shock-cell mode.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Closure {
    /// The loop closes on the upstream branch, at this point.
    InBand(ModePoint),
    /// The matching would need a frequency below the branch point.
    BelowBand,
    /// The matching would need a frequency above the saddle point.
    AboveBand,
    /// The mode has no upstream-propagating band.
    NoBand,
}

impl VortexSheet {
    /// A checked vortex sheet.
    ///
    /// # Errors
    /// [`RangeError`] naming `fully_expanded_mach_number`, `sound_speed_ratio` or
    /// `density_ratio`.
    pub fn new(mach: f64, sound_speed_ratio: f64, density_ratio: f64) -> Result<Self, RangeError> {
        Ok(Self {
            mach: MACH.check("fully_expanded_mach_number", mach)?,
            sound_speed_ratio: PROPERTY_RATIO.check("sound_speed_ratio", sound_speed_ratio)?,
            density_ratio: PROPERTY_RATIO.check("density_ratio", density_ratio)?,
        })
    }

    /// Jet and surroundings of the same perfect gas at static temperatures Tj and Ta:
    /// c = sqrt(Ta/Tj), s = Ta/Tj.
    ///
    /// # Errors
    /// [`RangeError`] naming `fully_expanded_mach_number` or `static_temperature_ratio`.
    pub fn same_gas(mach: f64, static_temperature_ratio: f64) -> Result<Self, RangeError> {
        let t = TEMPERATURE_RATIO.check("static_temperature_ratio", static_temperature_ratio)?;
        Self::new(mach, (1.0 / t).sqrt(), 1.0 / t)
    }

    /// The sheet of a fully expanded jet (its own and the ambient gas): c = a_ambient / aj,
    /// s = (R_ambient Ta) / (R_jet Tj).
    ///
    /// # Errors
    /// [`RangeError`] when the jet's Mach number or ratios fall outside the solver's ranges.
    pub fn of_jet(jet: &ExpandedJet) -> Result<Self, RangeError> {
        let tj = jet.total_temperature_k / jet.gas.total_to_static_temperature(jet.mj);
        let aj = jet.uj_m_s / jet.mj;
        let s = jet.ambient_gas.gas_constant() * jet.ambient_temperature_k / (jet.gas.gas_constant() * tj);
        Self::new(jet.mj, jet.a_amb_m_s / aj, s)
    }

    /// Fully expanded Mach number M.
    pub fn mach(&self) -> f64 {
        self.mach
    }

    /// a_ambient / aj.
    pub fn sound_speed_ratio(&self) -> f64 {
        self.sound_speed_ratio
    }

    /// rho_j / rho_ambient.
    pub fn density_ratio(&self) -> f64 {
        self.density_ratio
    }

    /// Strouhal number f L / Uj (L = 2R or 2b) of a dimensionless omega.
    pub fn strouhal(&self, omega: f64) -> f64 {
        omega / (PI * self.mach)
    }

    /// Dimensionless omega of a Strouhal number.
    pub fn omega_of_strouhal(&self, st: f64) -> f64 {
        st * PI * self.mach
    }

    fn ell(&self, q: f64) -> f64 {
        ((1.0 + q * self.mach).powi(2) - q * q).sqrt()
    }

    /// P at (lam, q).
    fn p(&self, mode: &GuidedMode, lam: f64, q: f64) -> f64 {
        let c = self.sound_speed_ratio;
        let ga = lam * (q * q - 1.0 / (c * c)).max(0.0).sqrt() / self.ell(q);
        self.density_ratio * (1.0 + q * self.mach).powi(2) * mode.outside(ga)
    }

    /// The residual N + P D of the relation at a dimensionless (kappa, omega), for checks
    /// against other implementations. `None` off the region kappa > omega / c.
    pub fn residual(&self, mode: &GuidedMode, kappa: f64, omega: f64) -> Option<f64> {
        let c = self.sound_speed_ratio;
        if !(omega > 0.0 && kappa >= omega / c * (1.0 - 1e-12)) {
            return None;
        }
        let lam = ((omega + kappa * self.mach).powi(2) - kappa * kappa).sqrt();
        let (n, d) = mode.inside(lam);
        Some(n + self.p(mode, lam, kappa / omega) * d)
    }

    /// The point of the mode's curve at `lam`; `None` outside (branch point, pole).
    pub fn point_at(&self, mode: &GuidedMode, lam: f64) -> Option<ModePoint> {
        let (lo, hi) = mode.branch();
        if !(lam > lo && lam < hi) {
            return None;
        }
        let (n, d) = mode.inside(lam);
        let target = -n / d;
        let q0 = 1.0 / self.sound_speed_ratio;
        let g = |q: f64| self.p(mode, lam, q) - target;
        if g(q0).partial_cmp(&0.0) != Some(std::cmp::Ordering::Less) {
            // Where Q(0) = 0 (m = 0, planar) the branch point is the branch's lower end and
            // Q(ga) ~ -1/ln(ga) for m = 0: just above it the curve lies closer to the sonic line
            // than q^2 - 1/c^2 can resolve (ga below about 1e-8), so the point is the sonic
            // line's to double precision. Elsewhere lam lies below the branch point.
            if mode.outside(0.0) == 0.0 {
                let omega = lam / self.ell(q0);
                return Some(ModePoint { lam, omega, kappa: q0 * omega });
            }
            return None;
        }
        let mut q1 = 2.0 * q0;
        while g(q1) < 0.0 {
            q1 *= 2.0;
            if q1 > 1e12 {
                return None;
            }
        }
        let q = brent(g, q0, q1, 0.0)?;
        let omega = lam / self.ell(q);
        Some(ModePoint { lam, omega, kappa: q * omega })
    }

    /// The branch point of a mode: on the sonic line (q = 1/c, ga = 0).
    pub fn branch_point(&self, mode: &GuidedMode) -> ModePoint {
        let (lo, hi) = mode.branch();
        let q0 = 1.0 / self.sound_speed_ratio;
        let pb = self.density_ratio * (1.0 + q0 * self.mach).powi(2) * mode.outside(0.0);
        let lam = if pb == 0.0 {
            lo
        } else {
            brent(
                |l| {
                    let (n, d) = mode.inside(l);
                    n + pb * d
                },
                lo,
                hi,
                0.0,
            )
            .unwrap_or(lo)
        };
        let omega = lam / self.ell(q0);
        ModePoint { lam, omega, kappa: q0 * omega }
    }

    /// Branch point, saddle point and band of a mode.
    pub fn band(&self, mode: &GuidedMode) -> ModeBand {
        let branch = self.branch_point(mode);
        let (_, hi) = mode.branch();
        let lb = branch.lam;
        // Coarse scan for the maximum of omega along the branch, then the zero of
        // d omega / d lam (central differences) bracketed around it.
        const SCAN: usize = 8;
        let span = hi - lb;
        let mut best = (0usize, branch.omega);
        let mut lams = [lb; SCAN];
        for (i, l) in lams.iter_mut().enumerate().skip(1) {
            *l = lb + span * i as f64 / SCAN as f64;
            if let Some(p) = self.point_at(mode, *l) {
                if p.omega > best.1 {
                    best = (i, p.omega);
                }
            }
        }
        let omega_at = |l: f64| self.point_at(mode, l).map_or(f64::NAN, |p| p.omega);
        let slope = |l: f64| {
            let h = 1e-6 * l;
            omega_at(l + h) - omega_at(l - h)
        };
        let i = best.0;
        let saddle = if i == 0 {
            // Falls from the branch point on, unless the maximum hides in the first interval.
            let l1 = lb + span / SCAN as f64;
            let near = lb + 1e-4 * span;
            if slope(near) > 0.0 {
                self.refine_saddle(mode, near, l1, &slope)
            } else {
                None
            }
        } else {
            let a = (lams[i - 1]).max(lb + 1e-4 * span);
            let b = if i + 1 < SCAN {
                lams[i + 1]
            } else {
                lb + span * (SCAN as f64 + 0.5) / (SCAN as f64 + 1.0)
            };
            self.refine_saddle(mode, a, b, &slope)
        };
        ModeBand { mode: *mode, branch, saddle: saddle.filter(|s| s.omega > branch.omega) }
    }

    fn refine_saddle(
        &self,
        mode: &GuidedMode,
        a: f64,
        b: f64,
        slope: &impl Fn(f64) -> f64,
    ) -> Option<ModePoint> {
        let l = brent(slope, a, b, 0.0)?;
        self.point_at(mode, l)
    }

    /// Closes the loop through the upstream branch of `band` with the dimensionless
    /// shock-cell wavenumber `k_s` (k_s R) and convection ratio Uc / Uj.
    pub fn close(&self, band: &ModeBand, k_s: f64, convection_ratio: f64) -> Closure {
        let Some(saddle) = band.saddle else { return Closure::NoBand };
        let uc = convection_ratio * self.mach;
        let f = |p: &ModePoint| p.kappa + p.omega / uc - k_s;
        if f(&band.branch) > 0.0 {
            return Closure::BelowBand;
        }
        if f(&saddle) < 0.0 {
            return Closure::AboveBand;
        }
        let mode = band.mode;
        let at = |l: f64| if l <= band.branch.lam { Some(band.branch) } else { self.point_at(&mode, l) };
        let root = brent(|l| at(l).map_or(f64::NAN, |p| f(&p)), band.branch.lam, saddle.lam, 0.0);
        match root.and_then(at) {
            Some(p) => Closure::InBand(p),
            None => Closure::NoBand,
        }
    }

    /// The frequency at which the loop closes with the sonic line k = -omega/c in place of a
    /// guided mode, solved as a root like [`VortexSheet::close`]: Powell's relation.
    pub fn close_on_sonic_line(&self, k_s: f64, convection_ratio: f64) -> f64 {
        let uc = convection_ratio * self.mach;
        let c = self.sound_speed_ratio;
        brent(|omega| omega / c + omega / uc - k_s, 0.0, k_s * (c + uc), 0.0).unwrap_or(f64::NAN)
    }

    /// `count` points of the mode's curve from the branch point towards the pole, each with
    /// whether its group velocity is negative (between branch and saddle).
    pub fn curve(&self, band: &ModeBand, count: usize) -> Vec<(ModePoint, bool)> {
        if count == 0 {
            return Vec::new();
        }
        let (_, hi) = band.mode.branch();
        let lb = band.branch.lam;
        let ls = band.saddle.map_or(lb, |s| s.lam);
        let mut out = Vec::with_capacity(count);
        out.push((band.branch, band.has_band()));
        // Stop short of the pole, where omega -> 0 and kappa grows without bound.
        let end = lb + 0.97 * (hi - lb);
        for i in 1..count {
            let l = lb + (end - lb) * i as f64 / (count - 1).max(1) as f64;
            if let Some(p) = self.point_at(&band.mode, l) {
                out.push((p, l <= ls));
            }
        }
        out
    }
}

/// Dimensionless shock-cell wavenumber k_s,n R (round) or k_s,n b (planar) of the vortex-sheet
/// spacing times `spacing_factor`: round `j0,n / (beta f)`, planar `pi (2n - 1) / (2 beta f)`,
/// beta = sqrt(M^2 - 1) (../shared/physics.md section 3 with R = Dj/2, b = hj/2).
pub fn shock_wavenumber(round: bool, mach: f64, n: u32, spacing_factor: f64) -> f64 {
    let beta = (mach * mach - 1.0).sqrt();
    if round {
        bessel::j0_zeros_cached()[(n as usize).saturating_sub(1)] / (beta * spacing_factor)
    } else {
        PI * f64::from(2 * n - 1) / (2.0 * beta * spacing_factor)
    }
}

/// Closure options.
#[derive(Debug, Clone, PartialEq)]
pub struct ClosureOptions {
    /// Modes to evaluate.
    pub modes: Vec<GuidedMode>,
    /// Uc / Uj.
    pub convection_ratio: f64,
    /// Factor on the vortex-sheet shock-cell spacing.
    pub spacing_factor: f64,
    /// Shock-cell modes n = 1..=cell_modes.
    pub cell_modes: u32,
}

impl ClosureOptions {
    /// Convection ratio Uc / Uj of the instability waves in the closure.
    pub const CONVECTION_RATIO: Setting = Setting::new(
        "convection_ratio",
        CONVECTION_RATIO,
        DEFAULT_CONVECTION_RATIO,
        "Uc = 0.7 Uj (Tam 1986)",
    );
    /// Factor on the vortex-sheet shock-cell spacing.
    pub const SPACING_FACTOR: Setting = Setting::new(
        "spacing_factor",
        super::cells::SPACING_FACTOR,
        super::cells::DEFAULT_SPACING_FACTOR,
        "pure vortex-sheet shock-cell spacing",
    );
    /// Shock-cell modes n = 1..cell_modes whose wavenumbers close the loop.
    pub const CELL_MODES: Setting = Setting::new(
        "cell_modes",
        CELL_MODES,
        DEFAULT_CELL_MODES as f64,
        "first and second shock-cell modes",
    );
    /// Points per dispersion curve in an answer.
    pub const CURVE_POINTS: Setting =
        Setting::new("curve_points", CURVE_POINTS, 100.0, "enough for a smooth plot");
    /// Relative tolerance on band membership for stage labels ([`DEFAULT_BAND_TOLERANCE`]).
    pub const BAND_TOLERANCE_FRACTION: Setting = Setting::new(
        "band_tolerance_fraction",
        BAND_TOLERANCE,
        DEFAULT_BAND_TOLERANCE,
        "measured stages spread by about this much between facilities; the inviscid m = 1 band is often narrower",
    );
}

/// One mode's band and its closure with each shock-cell mode.
#[derive(Debug, Clone, PartialEq)]
pub struct ModePrediction {
    /// Band of the upstream branch.
    pub band: ModeBand,
    /// (n, k_s,n R, outcome) for n = 1..=cell_modes.
    pub closures: Vec<(u32, f64, Closure)>,
}

/// Bands and closures of every requested mode. Modes whose shape does not fit the geometry
/// (`round`) are the caller's to refuse.
pub fn predict(sheet: &VortexSheet, round: bool, o: &ClosureOptions) -> Vec<ModePrediction> {
    o.modes
        .iter()
        .map(|mode| {
            let band = sheet.band(mode);
            let closures = (1..=o.cell_modes)
                .map(|n| {
                    let ks = shock_wavenumber(round, sheet.mach, n, o.spacing_factor);
                    (n, ks, sheet.close(&band, ks, o.convection_ratio))
                })
                .collect();
            ModePrediction { band, closures }
        })
        .collect()
}

/// A stage a measured tone is compatible with: its frequency lies in the mode's band, or within
/// a relative tolerance of it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StageMatch {
    /// Index of the mode in the prediction list.
    pub index: usize,
    /// The mode.
    pub mode: GuidedMode,
    /// Relative distance of the tone from the band: 0 inside, else the distance to the nearer
    /// edge over that edge's frequency.
    pub band_distance: f64,
    /// Nearest closure tone in the band: (shock-cell mode, dimensionless omega).
    pub closure: Option<(u32, f64)>,
    /// (measured - predicted) / predicted for that closure tone.
    pub relative_deviation: Option<f64>,
}

/// Allowed relative tolerance on band membership for stage labels.
pub const BAND_TOLERANCE: Bounds = Bounds::closed(0.0, 0.5, "");
/// Band tolerance when none is given: 2 %, about the spread of measured stage frequencies
/// between facilities at one NPR (common practice) and wider than the inviscid m = 1 band
/// itself, which is often under 1 % wide.
pub const DEFAULT_BAND_TOLERANCE: f64 = 0.02;

/// Relative distance of `omega` from a band (0 inside); infinite without a band.
fn band_distance(band: &ModeBand, omega: f64) -> f64 {
    let Some(s) = band.saddle else { return f64::INFINITY };
    if omega < band.branch.omega {
        (band.branch.omega - omega) / band.branch.omega
    } else if omega > s.omega {
        (omega - s.omega) / s.omega
    } else {
        0.0
    }
}

/// The modes whose band holds the dimensionless frequency `omega` or lies within `tolerance`
/// (relative) of it, best first: inside a band before near one (by distance), then by the
/// smallest |relative deviation| from an in-band closure tone. Empty when `omega` is near no
/// band.
pub fn label_tone(omega: f64, modes: &[ModePrediction], tolerance: f64) -> Vec<StageMatch> {
    let mut out: Vec<StageMatch> = modes
        .iter()
        .enumerate()
        .filter_map(|(index, m)| {
            let band_distance = band_distance(&m.band, omega);
            if band_distance > tolerance {
                return None;
            }
            let closure = m
                .closures
                .iter()
                .filter_map(|(n, _, c)| match c {
                    Closure::InBand(p) => Some((*n, p.omega)),
                    _ => None,
                })
                .min_by(|a, b| (a.1 - omega).abs().total_cmp(&(b.1 - omega).abs()));
            Some(StageMatch {
                index,
                mode: m.band.mode,
                band_distance,
                closure,
                relative_deviation: closure.map(|(_, w)| (omega - w) / w),
            })
        })
        .collect();
    out.sort_by(|a, b| {
        let key = |m: &StageMatch| m.relative_deviation.map_or(f64::INFINITY, f64::abs);
        a.band_distance.total_cmp(&b.band_distance).then(key(a).total_cmp(&key(b)))
    });
    out
}

/// Converts dimensionless results of a jet with a size: the length unit (R = Dj/2 or b = hj/2)
/// and the jet's sound speed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Scale {
    /// Length unit R or b, m.
    pub length_m: f64,
    /// Jet sound speed aj, m/s.
    pub aj_m_s: f64,
}

impl Scale {
    /// The scale of a round or planar jet; `None` for rectangular jets (no vortex-sheet modes
    /// here).
    pub fn of_jet(jet: &ExpandedJet) -> Option<Self> {
        let length_m = match jet.size {
            JetSize::Round { diameter_m } => diameter_m / 2.0,
            JetSize::Planar { height_m } => height_m / 2.0,
            JetSize::Rectangular { .. } => return None,
        };
        Some(Self { length_m, aj_m_s: jet.uj_m_s / jet.mj })
    }

    /// Frequency in Hz of a dimensionless omega.
    pub fn hz(&self, omega: f64) -> f64 {
        omega * self.aj_m_s / (2.0 * PI * self.length_m)
    }

    /// Dimensionless omega of a frequency in Hz (inverse of [`Scale::hz`]).
    pub fn omega(&self, hz: f64) -> f64 {
        hz * 2.0 * PI * self.length_m / self.aj_m_s
    }

    /// Axial wavenumber k in rad/m of a dimensionless kappa (k = -kappa / R).
    pub fn wavenumber(&self, kappa: f64) -> f64 {
        -kappa / self.length_m
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::physics::gas::Gas;
    use crate::physics::tones;

    fn cold(mj: f64) -> VortexSheet {
        // Cold jet of air: T0 = Ta, Tj/Ta = 1 / (1 + 0.2 Mj^2).
        VortexSheet::same_gas(mj, 1.0 / (1.0 + 0.2 * mj * mj)).unwrap()
    }

    #[test]
    fn sonic_line_closure_is_powells_relation() {
        // Closed form (../shared/physics.md section 4): f = Uc / (Ls (1 + Mc)). The root-solved
        // closure on the sonic line, converted to hertz, must equal it to 1e-12.
        for (mj, t0) in [(1.1, 288.15), (1.5, 288.15), (1.9, 600.0)] {
            for round in [true, false] {
                let size = if round {
                    JetSize::Round { diameter_m: 0.0254 }
                } else {
                    JetSize::Planar { height_m: 0.01 }
                };
                let jet = ExpandedJet::direct(Gas::AIR, Gas::AIR, mj, size, t0, 288.15).unwrap();
                let sheet = VortexSheet::of_jet(&jet).unwrap();
                let scale = Scale::of_jet(&jet).unwrap();
                for n in 1..=2 {
                    let ks = shock_wavenumber(round, mj, n, 0.8);
                    let f = scale.hz(sheet.close_on_sonic_line(ks, 0.7));
                    let zero = bessel::j0_zeros_cached()[n as usize - 1];
                    let ls = 0.8 * crate::physics::cells::vortex_sheet_spacing(&jet, n, zero);
                    let powell = tones::powell_fundamental(0.7 * jet.uj_m_s, jet.a_amb_m_s, ls);
                    assert!(((f - powell) / powell).abs() < 1e-12, "{f} vs {powell}");
                }
            }
        }
    }

    #[test]
    fn points_satisfy_the_relation_and_lie_outside_the_sonic_line() {
        // Definition (Tam & Hu 1989): every curve point is a root of the relation with
        // kappa > omega / c.
        for mj in [1.05, 1.3, 2.0] {
            let sheet = cold(mj);
            for mode in GuidedMode::defaults(true).into_iter().chain(GuidedMode::defaults(false)) {
                let band = sheet.band(&mode);
                // Points that hug the sonic line (for m = 0, Q(ga) ~ -1/ln(ga) makes the curve
                // approach it logarithmically) lose their digits in q^2 - 1/c^2 when
                // recomputed from (kappa, omega): skipped here.
                let c = sheet.sound_speed_ratio();
                let clear = |p: &ModePoint| p.kappa / p.omega - 1.0 / c > 1e-6;
                for (p, _) in sheet.curve(&band, 25).into_iter().skip(1).filter(|(p, _)| clear(p)) {
                    let r = sheet.residual(&mode, p.kappa, p.omega).expect("outside the sonic line");
                    let (n, _) = mode.inside(p.lam);
                    assert!(r.abs() < 1e-9 * (1.0 + n.abs()), "{mode:?} {p:?} {r}");
                }
            }
        }
    }

    #[test]
    fn branch_point_of_the_axisymmetric_mode_is_a_zero_of_j1() {
        // Closed form: on the sonic line Q_0(0) = 0, so lam J0'(lam) = 0, lam = j1,1, and
        // omega_b = j1,1 / sqrt((1 + M/c)^2 - 1/c^2).
        let sheet = cold(1.2);
        let b = sheet.branch_point(&GuidedMode::new(ModeShape::Round { azimuthal: 0 }, 1).unwrap());
        let c = sheet.sound_speed_ratio();
        let expect = 3.831_705_970_207_512 / ((1.0 + 1.2 / c).powi(2) - 1.0 / (c * c)).sqrt();
        assert!((b.omega - expect).abs() < 1e-12 * expect);
    }

    #[test]
    fn bands_of_cold_round_jets_lie_where_the_literature_puts_the_stages() {
        // Published positions (from memory; Edgington-Mitchell 2019 review, Gojon, Bogey &
        // Mihaescu 2018): the screech stages of cold round jets lie at Strouhal numbers of
        // roughly 0.3-0.7 for Mj 1.1-1.5, the axisymmetric A stages near 0.5-0.7 and the m = 1
        // (B, C) stages below them. Tolerance: the bands must overlap those ranges.
        for mj in [1.1, 1.2, 1.3, 1.4, 1.5] {
            let sheet = cold(mj);
            let a = sheet.band(&GuidedMode::new(ModeShape::Round { azimuthal: 0 }, 1).unwrap());
            let b = sheet.band(&GuidedMode::new(ModeShape::Round { azimuthal: 1 }, 1).unwrap());
            let st = |p: ModePoint| sheet.strouhal(p.omega);
            let (a_lo, a_hi) = (st(a.branch), st(a.saddle.unwrap()));
            let (b_lo, b_hi) = (st(b.branch), st(b.saddle.unwrap()));
            assert!(a_lo < 0.75 && a_hi > 0.45, "Mj {mj}: m=0 band {a_lo}-{a_hi}");
            assert!(b_lo < 0.6 && b_hi > 0.25, "Mj {mj}: m=1 band {b_lo}-{b_hi}");
            assert!(b_lo < a_lo, "m = 1 below m = 0 at Mj {mj}");
        }
    }

    #[test]
    fn closure_lies_in_the_band_or_says_where_it_falls() {
        let sheet = cold(1.3);
        let mode = GuidedMode::new(ModeShape::Round { azimuthal: 1 }, 1).unwrap();
        let band = sheet.band(&mode);
        let s = band.saddle.unwrap();
        // A shock wavenumber chosen so that the loop closes mid-band closes there.
        let mid = sheet.point_at(&mode, 0.5 * (band.branch.lam + s.lam)).unwrap();
        let ks = mid.kappa + mid.omega / (0.7 * 1.3);
        match sheet.close(&band, ks, 0.7) {
            Closure::InBand(p) => assert!((p.omega - mid.omega).abs() < 1e-10 * mid.omega),
            other => panic!("{other:?}"),
        }
        assert_eq!(sheet.close(&band, 0.5 * band.branch.kappa, 0.7), Closure::BelowBand);
        assert_eq!(sheet.close(&band, 10.0 * s.kappa, 0.7), Closure::AboveBand);
    }

    #[test]
    fn a_tone_at_a_closure_is_labelled_with_its_mode_and_one_outside_every_band_with_none() {
        // Definition of the labels (band membership; issue check "a synthetic tone at a
        // predicted stage frequency is labelled with that stage").
        // Mj 1.2, cells at 0.8 of the vortex sheet: the m = 0 mode closes in its band.
        let sheet = cold(1.2);
        let o = ClosureOptions {
            modes: GuidedMode::defaults(true),
            convection_ratio: 0.7,
            spacing_factor: 0.8,
            cell_modes: 2,
        };
        let preds = predict(&sheet, true, &o);
        let mut labelled = 0;
        for (i, m) in preds.iter().enumerate() {
            for (_, _, c) in &m.closures {
                if let Closure::InBand(p) = c {
                    let l = label_tone(p.omega, &preds, 0.0);
                    assert_eq!(l[0].index, i, "{:?}", m.band.mode);
                    assert!(l[0].relative_deviation.unwrap().abs() < 1e-12);
                    labelled += 1;
                }
            }
        }
        assert!(labelled > 0);
        // Far below every branch point.
        let lowest = preds.iter().map(|m| m.band.branch.omega).fold(f64::INFINITY, f64::min);
        assert!(label_tone(0.5 * lowest, &preds, DEFAULT_BAND_TOLERANCE).is_empty());
        // Just below a branch point: outside the band, inside the tolerance.
        let b = preds[1].band.branch.omega;
        assert!(label_tone(0.99 * b, &preds, 0.0).iter().all(|m| m.index != 1));
        let near = label_tone(0.99 * b, &preds, 0.02);
        let m = near.iter().find(|m| m.index == 1).unwrap();
        assert!((m.band_distance - 0.01).abs() < 1e-12);
    }

    #[test]
    fn bad_inputs_name_their_field() {
        assert_eq!(VortexSheet::same_gas(1.0, 0.8).unwrap_err().quantity, "fully_expanded_mach_number");
        assert_eq!(VortexSheet::same_gas(1.5, 0.0).unwrap_err().quantity, "static_temperature_ratio");
        assert_eq!(
            GuidedMode::new(ModeShape::Round { azimuthal: 3 }, 1).unwrap_err().quantity,
            "azimuthal_order"
        );
        assert_eq!(GuidedMode::new(ModeShape::PlanarSymmetric, 4).unwrap_err().quantity, "radial_order");
    }
}
