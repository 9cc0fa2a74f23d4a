//! `jetloop jet`: the fully expanded jet state of a nozzle at an operating point (its
//! arguments are the shared [`JetArgs`] group).

use crate::args::jet::JetArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::gas::jet_state_report;
use crate::render::report::Report;
use jetloop_proto::pb;
use jetloop_proto::pb::gas_dynamics_service_client::GasDynamicsServiceClient;

impl JetArgs {
    /// The JetState request: the nozzle, operating point and gases given.
    ///
    /// # Errors
    /// [`Failure::Usage`] when the nozzle or the pressure is incompletely given.
    pub(crate) fn request(&self) -> Result<pb::JetStateRequest, Failure> {
        Ok(pb::JetStateRequest { conditions: Some(self.conditions()?) })
    }
}

/// Runs `jet`.
impl Run for JetArgs {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = GasDynamicsServiceClient::new(ch).jet_state(a.request()?).await?.into_inner();
        Ok(jet_state_report(r))
    }
}

#[cfg(test)]
mod tests {
    //! Command line -> JetState request, without a server.

    use super::*;
    use jetloop_proto::pb::nozzle::Kind;
    use jetloop_proto::pb::operating_point::Pressure;

    fn request(line: &str) -> Result<pb::JetStateRequest, Failure> {
        let crate::Command::Jet(a) = crate::tests::command(line) else { panic!("{line}") };
        a.request()
    }

    #[test]
    fn a_rectangular_nozzle_with_its_gases_and_temperatures() {
        let c = request(
            "jet --nozzle rectangular --height-m 0.01 --width-m 0.05 --npr 3.2 --total-temperature-k 600 \
             --gamma 1.35 --ambient-gas-constant 287.05 --ideal-tolerance 0.01",
        )
        .expect("request")
        .conditions
        .expect("conditions");
        assert_eq!(
            c.nozzle.and_then(|n| n.kind),
            Some(Kind::Rectangular(pb::RectangularNozzle {
                exit_height_m: 0.01,
                exit_width_m: 0.05,
                design_mach_number: None
            }))
        );
        let op = c.operating_point.expect("operating point");
        assert_eq!(op.pressure, Some(Pressure::NozzlePressureRatio(3.2)));
        assert_eq!(op.total_temperature_k, Some(600.0));
        assert_eq!(c.gas, Some(pb::Gas { gamma: Some(1.35), gas_constant_j_per_kg_k: None }));
        assert_eq!(c.ambient_gas, Some(pb::Gas { gamma: None, gas_constant_j_per_kg_k: Some(287.05) }));
        assert_eq!(c.ideal_expansion_tolerance, Some(0.01));
    }

    #[test]
    fn a_total_pressure_travels_with_its_ambient_pressure_and_no_pressure_is_refused() {
        let c = request("jet --diameter-m 0.0254 --total-pressure-pa 400000 --ambient-pressure-pa 100000")
            .expect("request")
            .conditions
            .expect("conditions");
        let op = c.operating_point.expect("operating point");
        assert_eq!(
            op.pressure,
            Some(Pressure::Pressures(pb::ReservoirAndAmbientPressure {
                total_pressure_pa: 400_000.0,
                ambient_pressure_pa: 100_000.0
            }))
        );
        let e = request("jet --diameter-m 0.0254").unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("--npr")), "{e:?}");
    }
}
