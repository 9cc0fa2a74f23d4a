//! `jetloop info`: the server's version, models with their references, and limits.

use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::info_service_client::InfoServiceClient;

/// `jetloop info`: no arguments.
#[derive(Debug, Args)]
pub struct InfoCmd {}

/// Runs `info`.
impl Run for InfoCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let ch = ctx.channel().await?;
        let r = InfoServiceClient::new(ch).server_info(pb::ServerInfoRequest {}).await?.into_inner();
        let l = r.limits.unwrap_or_default();
        let mut p = r.provenance.unwrap_or_default();
        p.models = r.models;
        // Where the sized limits came from (the container's memory or the machine's).
        p.notes.extend(l.limit_sources.iter().map(|s| format!("limit: {s}")));
        Ok(Report::new(format!("jetloop server {}", r.server_version))
            .text("services", "services", r.services.join(", "))
            .int("max_request_bytes", "largest request", l.max_request_bytes, "bytes")
            .int(
                "max_request_samples",
                "most samples per request (longer: tones streams)",
                l.max_request_samples,
                "",
            )
            .num("request_timeout_s", "time limit per call", l.request_timeout_s, "s")
            .num("stream_timeout_s", "time limit per live tracking stream", l.stream_timeout_s, "s")
            .int("max_concurrent_requests", "calls at once (server-wide)", l.max_concurrent_requests, "")
            .int("sample_budget_bytes", "sample bytes all calls may hold", l.sample_budget_bytes, "bytes")
            .provenance(Some(p)))
    }
}
