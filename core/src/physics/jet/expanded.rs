//! The fully expanded jet the shock-cell, screech and guided-mode models use, from a jet
//! state or given directly.

use super::*;

/// Allowed fully expanded Mach number for a jet given directly.
pub const FULLY_EXPANDED_MACH: Bounds = Bounds::open_closed(1.0, 20.0, "");

/// The supersonic, fully expanded jet that shock-cell and tone models start from: Mach number,
/// size, velocity and the sound speeds. Made from a computed [`JetState`] or given directly.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ExpandedJet {
    /// Gas of the jet.
    pub gas: Gas,
    /// Gas of the surroundings.
    pub ambient_gas: Gas,
    /// Fully expanded Mach number Mj (> 1).
    pub mj: f64,
    /// Fully expanded dimensions.
    pub size: JetSize,
    /// Reservoir total temperature, K.
    pub total_temperature_k: f64,
    /// Ambient static temperature, K.
    pub ambient_temperature_k: f64,
    /// Fully expanded velocity Uj, m/s.
    pub uj_m_s: f64,
    /// Ambient sound speed (ambient gas), m/s.
    pub a_amb_m_s: f64,
}

/// Why a jet has no shock cells of the fully expanded (vortex-sheet) kind.
#[derive(Debug, Clone, PartialEq)]
pub struct NotSupersonic {
    /// Regime found.
    pub regime: Regime,
    /// Nozzle pressure ratio.
    pub npr: f64,
    /// Isentropic (fully expanded) Mach number.
    pub mj: f64,
    /// Critical pressure ratio of the gas.
    pub critical: f64,
    /// Exit Mach number.
    pub exit_mach: f64,
    /// NPR at which a normal shock stands in the exit plane.
    pub exit_shock_npr: f64,
}

impl std::fmt::Display for NotSupersonic {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let Self { regime, npr, mj, critical, exit_mach, exit_shock_npr } = *self;
        match regime {
            Regime::ShockInNozzle => write!(
                f,
                "a normal shock stands inside the divergent part of the nozzle (NPR {npr:.4} is \
                 below {exit_shock_npr:.4}, where the shock reaches the exit): the exit flow is \
                 subsonic (Me = {exit_mach:.4}), so the jet has no shock cells and no shock-cell, \
                 screech or shock-noise prediction exists"
            ),
            Regime::OverExpanded => write!(
                f,
                "the flow leaves the nozzle supersonic (Me = {exit_mach:.4}) but over-expanded \
                 below the critical pressure ratio (NPR {npr:.4} < {critical:.4}): its isentropic \
                 Mach number at ambient pressure is {mj:.4} < 1, so shocks at the lip turn the \
                 jet subsonic and the vortex-sheet shock-cell model (which needs Mj > 1) does not \
                 apply; no shock-cell, screech or shock-noise prediction is made"
            ),
            _ => write!(
                f,
                "the jet is subsonic (NPR {npr:.4} is below the critical pressure ratio \
                 {critical:.4}, Mj {mj:.4}): there are no shock cells, so no shock-cell, screech or \
                 shock-noise prediction exists"
            ),
        }
    }
}

impl std::error::Error for NotSupersonic {}

impl ExpandedJet {
    /// The expanded jet of a computed state.
    ///
    /// # Errors
    /// [`NotSupersonic`] when the state has no shock cells.
    pub fn from_state(s: &JetState) -> Result<Self, NotSupersonic> {
        if !s.supersonic {
            return Err(NotSupersonic {
                regime: s.regime,
                npr: s.npr,
                mj: s.mj,
                critical: s.gas.critical_pressure_ratio(),
                exit_mach: s.exit_mach,
                exit_shock_npr: s.exit_shock_npr,
            });
        }
        Ok(Self {
            gas: s.gas,
            ambient_gas: s.ambient_gas,
            mj: s.mj,
            size: s.size,
            total_temperature_k: s.total_temperature_k,
            ambient_temperature_k: s.ambient_temperature_k,
            uj_m_s: s.uj_m_s,
            a_amb_m_s: s.a_amb_m_s,
        })
    }

    /// A jet of gas `gas` issuing into `ambient_gas`, given directly by its fully expanded Mach
    /// number and size, with reservoir and ambient temperatures in K.
    ///
    /// # Errors
    /// [`RangeError`] naming `fully_expanded_mach_number`, a dimension, or a temperature.
    pub fn direct(
        gas: Gas,
        ambient_gas: Gas,
        mj: f64,
        size: JetSize,
        t0: f64,
        t_amb: f64,
    ) -> Result<Self, RangeError> {
        let mj = FULLY_EXPANDED_MACH.check("fully_expanded_mach_number", mj)?;
        match size {
            JetSize::Round { diameter_m } => {
                LENGTH.check("fully_expanded_diameter_m", diameter_m)?;
            }
            JetSize::Planar { height_m } => {
                LENGTH.check("fully_expanded_height_m", height_m)?;
            }
            JetSize::Rectangular { height_m, width_m } => {
                LENGTH.check("fully_expanded_height_m", height_m)?;
                Bounds::closed(height_m, LENGTH.max, "m (not less than the height)")
                    .check("fully_expanded_width_m", width_m)?;
            }
        }
        let t0 = TEMPERATURE.check("total_temperature_k", t0)?;
        let t_amb = TEMPERATURE.check("ambient_temperature_k", t_amb)?;
        let tj = t0 * gas.temperature_ratio(mj);
        Ok(Self {
            gas,
            ambient_gas,
            mj,
            size,
            total_temperature_k: t0,
            ambient_temperature_k: t_amb,
            uj_m_s: mj * gas.sound_speed(tj),
            a_amb_m_s: ambient_gas.sound_speed(t_amb),
        })
    }

    /// Length that Strouhal numbers and positions are scaled with: Dj for round jets, hj for
    /// rectangular and planar jets, m.
    pub fn reference_length_m(&self) -> f64 {
        self.size.reference_length_m()
    }

    /// Shock-cell parameter sqrt(Mj^2 - 1) (not the off-design parameter
    /// [`JetState::beta_from_design_mach`]).
    pub fn beta(&self) -> f64 {
        (self.mj * self.mj - 1.0).sqrt()
    }
}

/// Length d by which both sides of an h x b rectangle grow so that the area becomes
/// `ratio` h b: the root of d^2 + (h+b) d - (ratio-1) h b = 0 (written to avoid cancellation).
pub(super) fn equal_growth(h: f64, b: f64, ratio: f64) -> f64 {
    let s = h + b;
    let c = (ratio - 1.0) * h * b;
    2.0 * c / (s + (s * s + 4.0 * c).sqrt())
}
