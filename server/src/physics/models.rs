//! The catalogue of models the server implements, each with its literature reference. Every
//! response names the ones it used.

/// A named model and the literature it comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Model {
    /// Short model name.
    pub name: &'static str,
    /// Literature reference.
    pub reference: &'static str,
}

/// Isentropic perfect-gas relations.
pub const ISENTROPIC: Model = Model {
    name: "isentropic perfect-gas relations",
    reference:
        "NACA Report 1135 (Ames Research Staff, 1953), Equations, Tables and Charts for Compressible Flow",
};
/// Prandtl-Meyer expansion function.
pub const PRANDTL_MEYER: Model =
    Model { name: "Prandtl-Meyer function", reference: "Meyer (1908); NACA Report 1135 (1953)" };
/// Normal-shock jump relations.
pub const NORMAL_SHOCK: Model = Model {
    name: "normal-shock relations (Rankine-Hugoniot), Rayleigh pitot formula",
    reference: "NACA Report 1135 (1953)",
};
/// Fully expanded jet state.
pub const FULLY_EXPANDED_JET: Model = Model {
    name: "fully expanded jet (isentropic expansion to ambient pressure, mass conservation)",
    reference: "Tam & Tanna (1982), J. Sound Vib. 81, 337-358",
};
/// Choked mass flow.
pub const CHOKED_MASS_FLOW: Model =
    Model { name: "choked nozzle mass flow", reference: "NACA Report 1135 (1953); any gas-dynamics text" };
/// Standard atmosphere used for defaults.
pub const STANDARD_ATMOSPHERE: Model = Model {
    name: "ICAO standard atmosphere, sea level (101325 Pa, 288.15 K)",
    reference: "ICAO Doc 7488/3 (1993), Manual of the ICAO Standard Atmosphere",
};

/// Every model the server implements.
pub const ALL: &[Model] =
    &[ISENTROPIC, PRANDTL_MEYER, NORMAL_SHOCK, FULLY_EXPANDED_JET, CHOKED_MASS_FLOW, STANDARD_ATMOSPHERE];
