//! Thin gRPC handlers: convert, compute, convert back. One file per service.

pub mod calibration;
pub mod gas_dynamics;
pub mod info;
pub mod shock_cells;
pub mod spectrum;
pub mod staging;
pub mod tones;

use calibration::Calibration;
use gas_dynamics::GasDynamics;
use info::Info;
use jetloop_proto::pb::{
    calibration_service_server::CalibrationServiceServer,
    gas_dynamics_service_server::GasDynamicsServiceServer, info_service_server::InfoServiceServer,
    shock_cell_service_server::ShockCellServiceServer, spectrum_service_server::SpectrumServiceServer,
    staging_service_server::StagingServiceServer, tone_service_server::ToneServiceServer,
};
use shock_cells::ShockCells;
use spectrum::Spectrum;
use staging::Staging;
use tones::Tones;
use tonic::server::NamedService;

/// The jetloop services this server answers, by their gRPC names (taken from the generated
/// servers, so the list cannot drift from what is served).
pub const JETLOOP_SERVICES: &[&str] = &[
    <GasDynamicsServiceServer<GasDynamics> as NamedService>::NAME,
    <InfoServiceServer<Info> as NamedService>::NAME,
    <ShockCellServiceServer<ShockCells> as NamedService>::NAME,
    <ToneServiceServer<Tones> as NamedService>::NAME,
    <SpectrumServiceServer<Spectrum> as NamedService>::NAME,
    <StagingServiceServer<Staging> as NamedService>::NAME,
    <CalibrationServiceServer<Calibration> as NamedService>::NAME,
];

/// The standard services served beside them: health and reflection (v1 and v1alpha).
pub const STANDARD_SERVICES: &[&str] = &[
    tonic_health::pb::health_server::SERVICE_NAME,
    tonic_reflection::pb::v1::server_reflection_server::SERVICE_NAME,
    tonic_reflection::pb::v1alpha::server_reflection_server::SERVICE_NAME,
];
