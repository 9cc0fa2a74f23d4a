//! Prometheus metrics: calls and latency by method, answers by gRPC code, calls in flight,
//! refusals at the admission limit, open streams, samples received, and the sample budget in
//! use; served as text (exposition format 0.0.4) on a separate HTTP listener, off by default.
//!
//! Method labels come from the served API (the descriptor sets), never from the request: a
//! caller sending random paths cannot grow the label set (they count as `other`). Counting is
//! lock-free (atomics in a table built once).

use crate::runtime::budget::SampleBudget;
use crate::runtime::Computing;
use std::collections::HashMap;
use std::fmt::Write as _;
use std::sync::atomic::{AtomicI64, AtomicU64, Ordering::Relaxed};
use std::sync::Arc;
use std::time::Duration;

/// Upper bounds of the latency histogram buckets, seconds (then +Inf).
pub const LATENCY_BUCKETS_S: [f64; 19] = [
    50e-6, 100e-6, 250e-6, 500e-6, 1e-3, 2.5e-3, 5e-3, 10e-3, 25e-3, 50e-3, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0,
    10.0, 30.0, 60.0,
];

/// gRPC status code names, by number (0-16).
const CODES: [&str; 17] = [
    "OK",
    "CANCELLED",
    "UNKNOWN",
    "INVALID_ARGUMENT",
    "DEADLINE_EXCEEDED",
    "NOT_FOUND",
    "ALREADY_EXISTS",
    "PERMISSION_DENIED",
    "RESOURCE_EXHAUSTED",
    "FAILED_PRECONDITION",
    "ABORTED",
    "OUT_OF_RANGE",
    "UNIMPLEMENTED",
    "INTERNAL",
    "UNAVAILABLE",
    "DATA_LOSS",
    "UNAUTHENTICATED",
];

/// Counters of one method.
#[derive(Debug, Default)]
struct MethodStats {
    by_code: [AtomicU64; 17],
    buckets: [AtomicU64; LATENCY_BUCKETS_S.len() + 1],
    sum_ns: AtomicU64,
    streaming: bool,
}

/// The server's metrics, shared by the layer, the services and the endpoint.
#[derive(Debug)]
pub struct Metrics {
    names: Vec<String>,
    index: HashMap<String, usize>,
    methods: Vec<MethodStats>,
    in_flight: AtomicI64,
    streams_open: AtomicI64,
    shed: AtomicU64,
    samples: AtomicU64,
    sample_bytes: AtomicU64,
    budget: Option<SampleBudget>,
    computing: Option<Computing>,
}

/// Every method the server answers, `/package.Service/Method`, with whether it streams.
fn served_methods() -> Vec<(String, bool)> {
    use prost::Message;
    let mut out = Vec::new();
    for set in [
        jetloop_proto::FILE_DESCRIPTOR_SET,
        tonic_health::pb::FILE_DESCRIPTOR_SET,
        tonic_reflection::pb::v1::FILE_DESCRIPTOR_SET,
        tonic_reflection::pb::v1alpha::FILE_DESCRIPTOR_SET,
    ] {
        let Ok(set) = prost_types::FileDescriptorSet::decode(set) else { continue };
        for file in set.file {
            let package = file.package.unwrap_or_default();
            for svc in file.service {
                let svc_name = svc.name.unwrap_or_default();
                for m in svc.method {
                    let streaming = m.client_streaming() || m.server_streaming();
                    out.push((format!("/{package}.{svc_name}/{}", m.name.unwrap_or_default()), streaming));
                }
            }
        }
    }
    out
}

impl Metrics {
    /// Metrics for every served method; the gauges of `budget` and `computing` are read at
    /// scrape time when given.
    pub fn new(budget: Option<SampleBudget>, computing: Option<Computing>) -> Self {
        let mut names = Vec::new();
        let mut index = HashMap::new();
        let mut methods = Vec::new();
        for (path, streaming) in served_methods() {
            if index.contains_key(&path) {
                continue;
            }
            index.insert(path.clone(), names.len());
            names.push(path);
            methods.push(MethodStats { streaming, ..MethodStats::default() });
        }
        index.insert("other".into(), names.len());
        names.push("other".into());
        methods.push(MethodStats::default());
        Self {
            names,
            index,
            methods,
            in_flight: AtomicI64::new(0),
            streams_open: AtomicI64::new(0),
            shed: AtomicU64::new(0),
            samples: AtomicU64::new(0),
            sample_bytes: AtomicU64::new(0),
            budget,
            computing,
        }
    }

    pub(crate) fn method(&self, path: &str) -> usize {
        self.index.get(path).copied().unwrap_or(self.names.len() - 1)
    }

    /// One call refused at the admission limit.
    pub fn note_shed(&self) {
        self.shed.fetch_add(1, Relaxed);
    }

    /// `values` samples in `bytes` bytes received for analysis.
    pub fn note_samples(&self, values: u64, bytes: u64) {
        self.samples.fetch_add(values, Relaxed);
        self.sample_bytes.fetch_add(bytes, Relaxed);
    }

    pub(crate) fn start(&self, method: usize) {
        self.in_flight.fetch_add(1, Relaxed);
        if self.methods[method].streaming {
            self.streams_open.fetch_add(1, Relaxed);
        }
    }

    pub(crate) fn finish(&self, method: usize, code: usize, elapsed: Duration) {
        let m = &self.methods[method];
        self.in_flight.fetch_sub(1, Relaxed);
        if m.streaming {
            self.streams_open.fetch_sub(1, Relaxed);
        }
        m.by_code[code.min(16)].fetch_add(1, Relaxed);
        let s = elapsed.as_secs_f64();
        let b = LATENCY_BUCKETS_S.iter().position(|&le| s <= le).unwrap_or(LATENCY_BUCKETS_S.len());
        m.buckets[b].fetch_add(1, Relaxed);
        m.sum_ns.fetch_add(u64::try_from(elapsed.as_nanos()).unwrap_or(u64::MAX), Relaxed);
    }

    /// The Prometheus text exposition (format 0.0.4) of every metric.
    pub fn render(&self) -> String {
        let mut o = String::with_capacity(16 * 1024);
        let head = |o: &mut String, name: &str, kind: &str, help: &str| {
            let _ = writeln!(o, "# HELP {name} {help}\n# TYPE {name} {kind}");
        };
        head(&mut o, "jetloop_requests_total", "counter", "Calls answered, by method and gRPC status code.");
        for (name, m) in self.names.iter().zip(&self.methods) {
            for (code, n) in m.by_code.iter().enumerate() {
                let n = n.load(Relaxed);
                if n > 0 {
                    let _ = writeln!(
                        o,
                        "jetloop_requests_total{{method=\"{name}\",code=\"{}\"}} {n}",
                        CODES[code]
                    );
                }
            }
        }
        head(
            &mut o,
            "jetloop_request_duration_seconds",
            "histogram",
            "Time from a call's arrival to the end of its answer (whole stream for streams), seconds.",
        );
        for (name, m) in self.names.iter().zip(&self.methods) {
            let counts: Vec<u64> = m.buckets.iter().map(|b| b.load(Relaxed)).collect();
            let total: u64 = counts.iter().sum();
            if total == 0 {
                continue;
            }
            let mut cum = 0;
            for (i, c) in counts.iter().enumerate() {
                cum += c;
                let le = LATENCY_BUCKETS_S.get(i).map_or_else(|| "+Inf".to_string(), |v| format!("{v}"));
                let _ = writeln!(
                    o,
                    "jetloop_request_duration_seconds_bucket{{method=\"{name}\",le=\"{le}\"}} {cum}"
                );
            }
            let sum = m.sum_ns.load(Relaxed) as f64 * 1e-9;
            let _ = writeln!(o, "jetloop_request_duration_seconds_sum{{method=\"{name}\"}} {sum}");
            let _ = writeln!(o, "jetloop_request_duration_seconds_count{{method=\"{name}\"}} {total}");
        }
        let mut one = |name: &str, kind: &str, help: &str, v: String| {
            head(&mut o, name, kind, help);
            let _ = writeln!(o, "{name} {v}");
        };
        one(
            "jetloop_in_flight",
            "gauge",
            "Calls and streams in progress.",
            self.in_flight.load(Relaxed).to_string(),
        );
        one(
            "jetloop_streams_open",
            "gauge",
            "Streaming calls in progress.",
            self.streams_open.load(Relaxed).to_string(),
        );
        one(
            "jetloop_shed_total",
            "counter",
            "Calls refused with UNAVAILABLE at the limit of calls in flight.",
            self.shed.load(Relaxed).to_string(),
        );
        one(
            "jetloop_samples_total",
            "counter",
            "Sample values received for spectral analysis (all channels).",
            self.samples.load(Relaxed).to_string(),
        );
        one(
            "jetloop_sample_bytes_total",
            "counter",
            "Bytes of sample data received for spectral analysis.",
            self.sample_bytes.load(Relaxed).to_string(),
        );
        if let Some(b) = &self.budget {
            one(
                "jetloop_sample_budget_bytes_in_use",
                "gauge",
                "Sample bytes held by calls now, against the server-wide budget.",
                b.in_use().to_string(),
            );
        }
        if let Some(c) = &self.computing {
            one(
                "jetloop_computations_running",
                "gauge",
                "Computations running on the blocking pool now.",
                c.count().to_string(),
            );
        }
        o
    }
}

/// Largest HTTP request head read from a scraper, bytes.
const MAX_HEAD: usize = 8 * 1024;
/// Scrapes served at once; more connections wait in the accept queue.
const MAX_SCRAPES: usize = 8;

/// Serves `GET /metrics` on `listener` (plain HTTP/1.1, one answer per connection) until the
/// task is dropped. Anything else gets 404; a client that sends no complete head within 5 s is
/// dropped.
pub async fn serve_metrics(listener: tokio::net::TcpListener, metrics: Arc<Metrics>) {
    use tokio::io::{AsyncReadExt, AsyncWriteExt};
    let permits = Arc::new(tokio::sync::Semaphore::new(MAX_SCRAPES));
    loop {
        let Ok(permit) = permits.clone().acquire_owned().await else { return };
        let (mut sock, _) = match listener.accept().await {
            Ok(s) => s,
            Err(e) => {
                tracing::warn!("metrics listener: {e}");
                tokio::time::sleep(Duration::from_millis(100)).await;
                continue;
            }
        };
        let metrics = metrics.clone();
        tokio::spawn(async move {
            let _permit = permit;
            let mut head = Vec::with_capacity(1024);
            let read = tokio::time::timeout(Duration::from_secs(5), async {
                let mut buf = [0u8; 1024];
                while !head.windows(4).any(|w| w == b"\r\n\r\n") && head.len() < MAX_HEAD {
                    match sock.read(&mut buf).await {
                        Ok(0) | Err(_) => return false,
                        Ok(n) => head.extend_from_slice(&buf[..n]),
                    }
                }
                true
            })
            .await;
            if read != Ok(true) {
                return;
            }
            let first = head.split(|&b| b == b'\r').next().unwrap_or_default();
            let (status, kind, body) = if first.starts_with(b"GET /metrics ")
                || first.starts_with(b"GET /metrics?")
            {
                ("200 OK", "text/plain; version=0.0.4; charset=utf-8", metrics.render())
            } else {
                ("404 Not Found", "text/plain; charset=utf-8", "metrics are at GET /metrics\n".to_string())
            };
            let answer = format!(
                "HTTP/1.1 {status}\r\nContent-Type: {kind}\r\nContent-Length: {}\r\nConnection: close\r\n\r\n{body}",
                body.len()
            );
            let _ = sock.write_all(answer.as_bytes()).await;
            let _ = sock.shutdown().await;
        });
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_label_set_is_the_served_methods_and_unknown_paths_are_other() {
        let m = Metrics::new(None, None);
        assert!(m.index.contains_key("/jetloop.v1.GasDynamicsService/IsentropicRatios"), "{:?}", m.names);
        assert!(m.index.contains_key("/grpc.health.v1.Health/Check"));
        assert!(m.methods[m.method("/jetloop.v1.SpectrumService/TrackTones")].streaming);
        assert_eq!(m.method("/no.Such/Path"), m.method("other"));
    }

    #[test]
    fn a_call_lands_in_its_bucket_and_the_cumulative_counts_add_up() {
        let m = Metrics::new(None, None);
        let i = m.method("/grpc.health.v1.Health/Check");
        m.start(i);
        m.finish(i, 0, Duration::from_micros(700));
        m.start(i);
        m.finish(i, 14, Duration::from_secs(100));
        let text = m.render();
        assert!(
            text.contains("jetloop_requests_total{method=\"/grpc.health.v1.Health/Check\",code=\"OK\"} 1")
        );
        assert!(text.contains("code=\"UNAVAILABLE\"} 1"));
        assert!(text.contains("le=\"0.0005\"} 0"), "{text}");
        assert!(text.contains("le=\"0.001\"} 1"));
        assert!(text.contains("le=\"60\"} 1"));
        assert!(text.contains("le=\"+Inf\"} 2"));
        assert!(text.contains("jetloop_in_flight 0"));
    }
}
