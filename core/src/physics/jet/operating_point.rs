//! Operating points: the reservoir and ambient state a nozzle runs at, given as a pressure
//! ratio, reservoir and ambient pressures, or a gauge pressure.

use super::*;

/// Reservoir and ambient conditions, with the gas of the surroundings and the tolerance of
/// the ideally expanded class.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OperatingPoint {
    pub(super) npr: f64,
    pub(super) ambient_pressure_pa: f64,
    pub(super) total_temperature_k: f64,
    pub(super) ambient_temperature_k: f64,
    pub(super) ambient_gas: Gas,
    pub(super) ideal_tolerance: f64,
}

impl OperatingPoint {
    /// Operating point from the nozzle pressure ratio, ambient pressure (Pa), total and
    /// ambient temperatures (K).
    ///
    /// # Errors
    /// [`RangeError`] naming `nozzle_pressure_ratio`, `ambient_pressure_pa`,
    /// `total_temperature_k` or `ambient_temperature_k`.
    pub fn new(npr: f64, p_amb: f64, t0: f64, t_amb: f64) -> Result<Self, RangeError> {
        Ok(Self {
            npr: NPR.check("nozzle_pressure_ratio", npr)?,
            ambient_pressure_pa: PRESSURE.check("ambient_pressure_pa", p_amb)?,
            total_temperature_k: TEMPERATURE.check("total_temperature_k", t0)?,
            ambient_temperature_k: TEMPERATURE.check("ambient_temperature_k", t_amb)?,
            ambient_gas: Gas::AIR,
            ideal_tolerance: DEFAULT_IDEAL_TOLERANCE,
        })
    }

    /// Operating point from reservoir total and ambient pressures in Pa.
    ///
    /// # Errors
    /// As [`OperatingPoint::new`], with `total_pressure_pa` named when it is out of range or
    /// below the ambient pressure.
    pub fn from_pressures(p0: f64, p_amb: f64, t0: f64, t_amb: f64) -> Result<Self, RangeError> {
        let p0 = PRESSURE.check("total_pressure_pa", p0)?;
        let p_amb = PRESSURE.check("ambient_pressure_pa", p_amb)?;
        let npr = p0 / p_amb;
        if !NPR.contains(npr) {
            return Err(RangeError::new(
                "total_pressure_pa",
                p0,
                format!(
                    "[{}, {}] Pa: {NPR} times the ambient pressure {p_amb} Pa (the reservoir \
                     pressure may not be below ambient)",
                    NPR.min * p_amb,
                    NPR.max * p_amb
                ),
            ));
        }
        Self::new(npr, p_amb, t0, t_amb)
    }

    /// From a reservoir gauge pressure (what rig transducers read: p0 - p_ambient, Pa) and the
    /// absolute ambient pressure `p_amb` (Pa): p0 = p_gauge + p_amb.
    ///
    /// # Errors
    /// [`RangeError`] naming `reservoir_gauge_pressure_pa`, `ambient_pressure_pa` or a
    /// temperature, or the gauge pressure when the ratio leaves [`NPR`].
    pub fn from_gauge(p_gauge: f64, p_amb: f64, t0: f64, t_amb: f64) -> Result<Self, RangeError> {
        let p_gauge = GAUGE_PRESSURE.check("reservoir_gauge_pressure_pa", p_gauge)?;
        let p_amb = PRESSURE.check("ambient_pressure_pa", p_amb)?;
        let npr = (p_gauge + p_amb) / p_amb;
        if !NPR.contains(npr) {
            return Err(RangeError::new(
                "reservoir_gauge_pressure_pa",
                p_gauge,
                format!(
                    "[0, {}] Pa: NPR at most {} over the ambient pressure {p_amb} Pa",
                    (NPR.max - 1.0) * p_amb,
                    NPR.max
                ),
            ));
        }
        Self::new(npr, p_amb, t0, t_amb)
    }

    /// Nozzle pressure ratio p0/p_ambient.
    pub fn npr(&self) -> f64 {
        self.npr
    }

    /// Ambient pressure, Pa.
    pub fn ambient_pressure_pa(&self) -> f64 {
        self.ambient_pressure_pa
    }

    /// Reservoir total temperature, K.
    pub fn total_temperature_k(&self) -> f64 {
        self.total_temperature_k
    }

    /// Ambient temperature, K.
    pub fn ambient_temperature_k(&self) -> f64 {
        self.ambient_temperature_k
    }

    /// Gas of the surroundings (dry air unless set).
    pub fn ambient_gas(&self) -> Gas {
        self.ambient_gas
    }

    /// Tolerance on |pe/pa - 1| within which the jet counts as ideally expanded.
    pub fn ideal_tolerance(&self) -> f64 {
        self.ideal_tolerance
    }

    /// The same point with another ambient gas.
    pub fn with_ambient_gas(self, gas: Gas) -> Self {
        Self { ambient_gas: gas, ..self }
    }

    /// The same point with another ideal-expansion tolerance, in [`IDEAL_TOLERANCE`].
    ///
    /// # Errors
    /// [`RangeError`] naming `ideal_expansion_tolerance`.
    pub fn with_ideal_tolerance(self, tol: f64) -> Result<Self, RangeError> {
        Ok(Self { ideal_tolerance: IDEAL_TOLERANCE.check("ideal_expansion_tolerance", tol)?, ..self })
    }

    /// The same point at another nozzle pressure ratio.
    ///
    /// # Errors
    /// [`RangeError`] naming `nozzle_pressure_ratio`.
    pub fn with_npr(&self, npr: f64) -> Result<Self, RangeError> {
        Ok(Self { npr: NPR.check("nozzle_pressure_ratio", npr)?, ..*self })
    }
}
