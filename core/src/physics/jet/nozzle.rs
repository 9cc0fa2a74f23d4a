//! Nozzles: round convergent and convergent-divergent, rectangular and planar, with their
//! exit and throat sections.

use super::*;

/// A cross-section: the nozzle exit ([`Shape`]) or the fully expanded jet ([`JetSize`]).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Section {
    /// Round, of diameter `diameter_m` (m).
    Round {
        /// Diameter, m.
        diameter_m: f64,
    },
    /// Rectangular; `height_m` is the short side (m).
    Rectangular {
        /// Height (short side), m.
        height_m: f64,
        /// Width (long side), m.
        width_m: f64,
    },
    /// Two-dimensional, of height `height_m` (m) and infinite span.
    Planar {
        /// Height, m.
        height_m: f64,
    },
}

impl Section {
    /// The length Strouhal numbers and positions are scaled with: the diameter of a round
    /// section, the height otherwise, m.
    pub fn reference_length_m(&self) -> f64 {
        match *self {
            Section::Round { diameter_m } => diameter_m,
            Section::Rectangular { height_m, .. } | Section::Planar { height_m } => height_m,
        }
    }
}

/// Cross-section of the nozzle exit.
pub type Shape = Section;

/// A nozzle: exit shape and design Mach number (1 for a convergent nozzle).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Nozzle {
    pub(super) shape: Shape,
    pub(super) design_mach: f64,
}

impl Nozzle {
    /// Round convergent nozzle of exit diameter `d` in m.
    ///
    /// # Errors
    /// [`RangeError`] naming `exit_diameter_m` outside [`LENGTH`].
    pub fn round_convergent(d: f64) -> Result<Self, RangeError> {
        Ok(Self { shape: Shape::Round { diameter_m: LENGTH.check("exit_diameter_m", d)? }, design_mach: 1.0 })
    }

    /// Round convergent-divergent nozzle of exit diameter `d` in m and design Mach `md`.
    ///
    /// # Errors
    /// [`RangeError`] naming `exit_diameter_m` or `design_mach_number`.
    pub fn round_cd(d: f64, md: f64) -> Result<Self, RangeError> {
        Ok(Self {
            shape: Shape::Round { diameter_m: LENGTH.check("exit_diameter_m", d)? },
            design_mach: DESIGN_MACH.check("design_mach_number", md)?,
        })
    }

    /// Round convergent-divergent nozzle from its exit-to-throat area ratio; the design Mach
    /// number is the supersonic root of A/A* for `gas`.
    ///
    /// # Errors
    /// [`RangeError`] naming `exit_diameter_m` or `exit_to_throat_area_ratio`.
    pub fn round_cd_from_area_ratio(d: f64, area_ratio: f64, gas: &Gas) -> Result<Self, RangeError> {
        let ar = NOZZLE_AREA_RATIO.check("exit_to_throat_area_ratio", area_ratio)?;
        let md = gas
            .mach_from_area_ratio(ar, Branch::Supersonic)
            .map_err(|e| RangeError { quantity: "exit_to_throat_area_ratio", ..e })?;
        Self::round_cd(d, md).map_err(|e| match e.quantity {
            "design_mach_number" => RangeError::new(
                "exit_to_throat_area_ratio",
                area_ratio,
                format!("ratios whose design Mach number lies in {DESIGN_MACH}"),
            ),
            _ => e,
        })
    }

    /// Rectangular nozzle, exit height `h` (short side) and width `b` in m, design Mach `md`.
    ///
    /// # Errors
    /// [`RangeError`] naming `exit_height_m`, `exit_width_m` (also when narrower than the
    /// height) or `design_mach_number`.
    pub fn rectangular(h: f64, b: f64, md: f64) -> Result<Self, RangeError> {
        let h = LENGTH.check("exit_height_m", h)?;
        let b =
            Bounds::closed(h, LENGTH.max, "m (not less than the exit height)").check("exit_width_m", b)?;
        Ok(Self {
            shape: Shape::Rectangular { height_m: h, width_m: b },
            design_mach: DESIGN_MACH.check("design_mach_number", md)?,
        })
    }

    /// Planar nozzle of exit height `h` in m and design Mach `md`.
    ///
    /// # Errors
    /// [`RangeError`] naming `exit_height_m` or `design_mach_number`.
    pub fn planar(h: f64, md: f64) -> Result<Self, RangeError> {
        Ok(Self {
            shape: Shape::Planar { height_m: LENGTH.check("exit_height_m", h)? },
            design_mach: DESIGN_MACH.check("design_mach_number", md)?,
        })
    }

    /// Exit shape.
    pub fn shape(&self) -> Shape {
        self.shape
    }

    /// Design Mach number (1 for convergent nozzles).
    pub fn design_mach(&self) -> f64 {
        self.design_mach
    }

    /// Exit area in m^2 (round, rectangular) or exit height in m (planar, per metre of span).
    pub(super) fn exit_measure(&self) -> f64 {
        match self.shape {
            Shape::Round { diameter_m } => std::f64::consts::PI * 0.25 * diameter_m * diameter_m,
            Shape::Rectangular { height_m, width_m } => height_m * width_m,
            Shape::Planar { height_m } => height_m,
        }
    }
}
