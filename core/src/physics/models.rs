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

/// Vortex-sheet shock-cell spacing.
pub const VORTEX_SHEET_CELLS: Model = Model {
    name: "vortex-sheet shock-cell spacing (round: pi sqrt(Mj^2-1) Dj / j0,n; planar: 2 hj sqrt(Mj^2-1) / (2n-1))",
    reference: "Prandtl (1904); Pack (1950), Q. J. Mech. Appl. Math. 3; Tam, Jackson & Seiner (1985), J. Fluid Mech. 153",
};
/// Rectangular-jet spacing.
pub const TAM_1988_RECTANGULAR: Model = Model {
    name: "rectangular-jet shock-cell spacing 2 sqrt(Mj^2-1) / sqrt(1/hj^2 + 1/bj^2)",
    reference: "Tam (1988), J. Sound Vib. 121, 135-147",
};
/// Powell's fundamental.
pub const POWELL_FUNDAMENTAL: Model = Model {
    name: "Powell fundamental f = Uc / (Ls (1 + Mc))",
    reference: "Powell (1953), Proc. Phys. Soc. B 66; Tam (1988) for rectangular jets",
};
/// Powell's loop criterion.
pub const POWELL_LOOP: Model = Model {
    name: "Powell feedback-loop criterion tau = n / f (paths, reflector, fixed delays)",
    reference: "Powell (1953), Proc. Phys. Soc. B 66",
};
/// Tam, Seiner & Yu 1986.
pub const TAM_1986: Model = Model {
    name: "Tam, Seiner & Yu screech formula (round jets)",
    reference: "Tam, Seiner & Yu (1986), J. Sound Vib. 110, 309-321",
};
/// Shock-noise peak frequency.
pub const SHOCK_NOISE_PEAK: Model = Model {
    name: "shock-associated noise peak f = Uc / (Ls (1 - Mc cos psi))",
    reference: "Harper-Bourne & Fisher (1973), AGARD CP-131; Tam & Tanna (1982), J. Sound Vib. 81",
};

/// Welch PSD.
pub const WELCH_PSD: Model = Model {
    name: "Welch averaged-periodogram PSD, one-sided, periodic window",
    reference: "Welch (1967), IEEE Trans. Audio Electroacoust. 15; windows: Harris (1978), Proc. IEEE 66",
};
/// Sound pressure level.
pub const SPL: Model =
    Model { name: "sound pressure level re 20 uPa", reference: "ISO 1683:2015; ANSI S1.1" };
/// Tone extraction.
pub const TONE_EXTRACTION: Model = Model {
    name: "tones above a running-median floor; Grandke interpolation (Hann) or log-parabolic",
    reference: "Grandke (1983), IEEE Trans. Instrum. Meas. 32",
};
/// One-third-octave bands.
pub const THIRD_OCTAVE: Model =
    Model { name: "one-third-octave bands, base ten", reference: "IEC 61260-1:2014" };
/// A-weighting.
pub const A_WEIGHTING: Model =
    Model { name: "A-frequency-weighting", reference: "IEC 61672-1:2013, Annex E" };

/// Level corrections: response curves, spherical spreading.
pub const LEVEL_CORRECTIONS: Model = Model {
    name:
        "microphone response curves (log-frequency interpolation) and spherical spreading 20 log10(r / r_ref)",
    reference:
        "inverse-square law of a point source in the far field; response charts of the microphone maker",
};
/// Atmospheric absorption.
pub const ATMOSPHERIC_ABSORPTION: Model =
    Model { name: "pure-tone atmospheric absorption", reference: "ISO 9613-1:1993" };

/// Microphone sensitivity from a sound-calibrator recording.
pub const CALIBRATOR_READING: Model = Model {
    name: "sound-calibrator reading: tone power summed over its bins of a Blackman-Harris Welch PSD above \
           the local floor, power-centroid frequency, block spans, THD_F and THD+N (20 Hz-20 kHz)",
    reference: "IEC 60942:2017 (sound calibrators); Welch (1967); Harris (1978), Proc. IEEE 66; AES17 \
                measurement bandwidth",
};

/// Stage segmentation.
pub const STAGE_SEGMENTATION: Model = Model {
    name: "stage segmentation by frequency-continuity branch tracking, quadratic smooth fits",
    reference: "jetloop method (documented in the staging module); stage nomenclature after Powell (1953)",
};

/// Every model the server implements.
pub const ALL: &[Model] = &[
    ISENTROPIC,
    PRANDTL_MEYER,
    NORMAL_SHOCK,
    FULLY_EXPANDED_JET,
    CHOKED_MASS_FLOW,
    STANDARD_ATMOSPHERE,
    VORTEX_SHEET_CELLS,
    TAM_1988_RECTANGULAR,
    POWELL_FUNDAMENTAL,
    POWELL_LOOP,
    TAM_1986,
    SHOCK_NOISE_PEAK,
    WELCH_PSD,
    SPL,
    TONE_EXTRACTION,
    THIRD_OCTAVE,
    A_WEIGHTING,
    STAGE_SEGMENTATION,
    CALIBRATOR_READING,
];

/// Guided jet modes of the vortex sheet, their bands and the screech closure through them.
pub const GUIDED_JET_MODES: Model = Model {
    name: "guided jet modes of the vortex sheet (upstream neutral modes between branch and saddle points; closure omega/Uc - k_s,n = k_guided)",
    reference: "Tam & Hu (1989), J. Fluid Mech. 201, 447-483; Gojon, Bogey & Mihaescu (2018), AIAA J. 56; Mancinelli et al. (2019), Exp. Fluids 60; Edgington-Mitchell (2019), Int. J. Aeroacoust. 18",
};

/// Welch cross-spectra, coherence and azimuthal decomposition.
pub const CROSS_SPECTRA: Model = Model {
    name: "Welch cross-spectral density, magnitude-squared coherence, azimuthal mode decomposition of a microphone ring",
    reference: "Welch (1967), IEEE Trans. Audio Electroacoust. 15; Bendat & Piersol, Random Data (4th ed., 2010), ch. 9; scipy.signal.csd / coherence",
};
