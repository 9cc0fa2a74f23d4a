//! ShockCellService: shock-cell spacing requests, computation glue and responses.

use super::error::{ApiError, Check};
use super::gas::jet_state_message;
use super::jet_input::{cell_models, notes, with_state_models};
use super::jet_input::{cell_options, jet_summary, resolve_jet, ResolvedJet};
use super::provenance::provenance;
use super::Compute;
use crate::cancel::Cancel;
use crate::physics::cells::{self, CellOptions};
use jetloop_proto::pb;

/// A validated shock-cell question.
#[derive(Debug, Clone)]
pub struct CellQuery {
    /// The jet.
    pub jet: ResolvedJet,
    /// Options.
    pub options: CellOptions,
}

impl TryFrom<pb::CellSpacingRequest> for CellQuery {
    type Error = ApiError;

    fn try_from(req: pb::CellSpacingRequest) -> Result<Self, ApiError> {
        let pb::CellSpacingRequest { jet, options } = req;
        let mut jet = resolve_jet(jet, "jet")?;
        let mut check = Check::new();
        let o = cell_options(&mut check, &mut jet.defaults, options, "options", 3);
        check.finish(o.map(|options| CellQuery { jet, options }))
    }
}

/// Computes and builds the CellSpacing response.
pub fn cell_message(q: &CellQuery) -> pb::CellSpacingResponse {
    let c = cells::cells(&q.jet.jet, &q.options);
    let l = q.jet.jet.reference_length_m();
    pb::CellSpacingResponse {
        state: q.jet.state.as_ref().map(jet_state_message),
        jet: Some(jet_summary(&q.jet.jet)),
        spacing_factor: c.factor,
        modes: c
            .modes
            .iter()
            .map(|m| pb::CellMode {
                mode: m.n,
                vortex_sheet_spacing_m: m.vortex_sheet_m,
                spacing_m: m.spacing_m,
                spacing_over_reference_length: m.spacing_m / l,
                bessel_zero: m.bessel_zero,
            })
            .collect(),
        shocks: c
            .shock_positions_m
            .iter()
            .enumerate()
            .map(|(i, x)| pb::ShockPosition {
                index: i as u32 + 1,
                axial_position_m: *x,
                axial_position_over_reference_length: x / l,
            })
            .collect(),
        provenance: Some(provenance(
            &with_state_models(cell_models(&q.jet.jet), &q.jet),
            &q.jet.defaults,
            notes(&q.jet),
        )),
    }
}

impl Compute for CellQuery {
    type Response = pb::CellSpacingResponse;

    /// The shock-cell spacings and the response.
    fn compute(self, _cancel: &Cancel) -> Result<pb::CellSpacingResponse, ApiError> {
        Ok(cell_message(&self))
    }
}
