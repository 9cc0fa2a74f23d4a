//! The connection to the server: address, TLS (and client certificates), bearer token and
//! the call time limit, from the global flags.

use crate::failure::Failure;

/// Where the server is; commands connect when they need it (`synth` never does).
#[derive(Debug)]
pub(crate) struct Ctx {
    /// The server's URL.
    server: String,
    /// The time limit of a call (connecting gets at least a second).
    timeout: Option<std::time::Duration>,
    /// The token sent with every call.
    bearer: Bearer,
    /// TLS settings, when the server is reached over TLS.
    tls: Option<tonic::transport::ClientTlsConfig>,
}

/// Adds `authorization: Bearer <token>` to every call when a token was given.
#[derive(Debug, Clone, Default)]
pub(crate) struct Bearer(Option<tonic::metadata::MetadataValue<tonic::metadata::Ascii>>);

impl tonic::service::Interceptor for Bearer {
    fn call(&mut self, mut req: tonic::Request<()>) -> Result<tonic::Request<()>, tonic::Status> {
        if let Some(v) = &self.0 {
            req.metadata_mut().insert("authorization", v.clone());
        }
        Ok(req)
    }
}

/// A connection to the server with the token (if any) on every call.
pub(crate) type Conn = tonic::service::interceptor::InterceptedService<tonic::transport::Channel, Bearer>;

/// The bearer token from `--token-file` (its first line that is neither blank nor a `#`
/// comment) or `JETLOOP_TOKEN`.
///
/// # Errors
/// [`Failure::Usage`] when the file cannot be read or the token is not printable ASCII.
pub(crate) fn bearer(token_file: Option<&std::path::Path>) -> Result<Bearer, Failure> {
    let token = match token_file {
        Some(p) => {
            let text = std::fs::read_to_string(p)
                .map_err(|e| Failure::Usage(format!("cannot read the token file {}: {e}", p.display())))?;
            text.lines().map(str::trim).find(|l| !l.is_empty() && !l.starts_with('#')).map(str::to_string)
        }
        None => std::env::var("JETLOOP_TOKEN").ok().filter(|t| !t.is_empty()),
    };
    match token {
        None => Ok(Bearer(None)),
        Some(t) => format!("Bearer {t}")
            .parse()
            .map(|v| Bearer(Some(v)))
            .map_err(|_| Failure::Usage("the token must be printable ASCII".into())),
    }
}

/// The TLS settings of `--ca-file` and, for mutual TLS, `--client-cert` / `--client-key`;
/// none without a CA file.
///
/// # Errors
/// [`Failure::Usage`] when a file cannot be read.
pub(crate) fn client_tls(
    ca: Option<&std::path::Path>,
    cert: Option<&std::path::Path>,
    key: Option<&std::path::Path>,
) -> Result<Option<tonic::transport::ClientTlsConfig>, Failure> {
    let Some(ca) = ca else { return Ok(None) };
    let read = |flag: &str, p: &std::path::Path| {
        std::fs::read(p).map_err(|e| Failure::Usage(format!("cannot read {flag} {}: {e}", p.display())))
    };
    let mut tls = tonic::transport::ClientTlsConfig::new()
        .ca_certificate(tonic::transport::Certificate::from_pem(read("--ca-file", ca)?));
    if let (Some(cert), Some(key)) = (cert, key) {
        tls = tls.identity(tonic::transport::Identity::from_pem(
            read("--client-cert", cert)?,
            read("--client-key", key)?,
        ));
    }
    Ok(Some(tls))
}

/// The global connection flags as given on the command line.
#[derive(Debug, Default)]
pub(crate) struct Flags {
    /// `--server`: the server's URL.
    pub server: String,
    /// `--timeout`: the time limit of a call in s.
    pub timeout_s: Option<f64>,
    /// `--token-file`: the file holding the bearer token.
    pub token_file: Option<std::path::PathBuf>,
    /// `--ca-file`: the CA certificate (PEM) for TLS.
    pub ca_file: Option<std::path::PathBuf>,
    /// `--client-cert`: the client certificate (PEM) for mutual TLS.
    pub client_cert: Option<std::path::PathBuf>,
    /// `--client-key`: the client certificate's private key (PEM).
    pub client_key: Option<std::path::PathBuf>,
}

/// The time limit of `--timeout`, in s.
///
/// # Errors
/// [`Failure::Usage`] outside (0, 1e6] s.
pub(crate) fn time_limit(timeout_s: Option<f64>) -> Result<Option<std::time::Duration>, Failure> {
    match timeout_s {
        None => Ok(None),
        Some(t) if t > 0.0 && t <= 1e6 => Ok(Some(std::time::Duration::from_secs_f64(t))),
        Some(t) => Err(Failure::Usage(format!("--timeout {t}: give seconds in (0, 1e6]"))),
    }
}

impl Ctx {
    /// The connection the global flags describe (nothing is connected yet): the time limit
    /// checked, the TLS files and the token read.
    ///
    /// # Errors
    /// [`Failure::Usage`] for a time limit out of range or a file that cannot be read.
    pub(crate) fn from_flags(f: Flags) -> Result<Self, Failure> {
        let timeout = time_limit(f.timeout_s)?;
        let tls = client_tls(f.ca_file.as_deref(), f.client_cert.as_deref(), f.client_key.as_deref())?;
        Ok(Ctx::new(f.server, timeout, bearer(f.token_file.as_deref())?, tls))
    }

    /// The server at `server` (a URL), calls limited to `timeout`, with `bearer` on every call
    /// and `tls` when given.
    pub(crate) fn new(
        server: String,
        timeout: Option<std::time::Duration>,
        bearer: Bearer,
        tls: Option<tonic::transport::ClientTlsConfig>,
    ) -> Self {
        Self { server, timeout, bearer, tls }
    }

    /// A connection to the server.
    ///
    /// # Errors
    /// [`Failure::Usage`] for a malformed address, [`Failure::Connect`] when it cannot be
    /// reached.
    pub async fn channel(&self) -> Result<Conn, Failure> {
        self.connect(Some(self.timeout.unwrap_or(DEFAULT_CALL_LIMIT))).await
    }

    /// A connection for a stream (live tracking, a recording sent in blocks), which lasts as
    /// long as its recording: limited by `--timeout` only.
    ///
    /// # Errors
    /// As [`Ctx::channel`].
    pub async fn stream_channel(&self) -> Result<Conn, Failure> {
        self.connect(self.timeout).await
    }

    async fn connect(&self, limit: Option<std::time::Duration>) -> Result<Conn, Failure> {
        let url = endpoint_url(&self.server, self.tls.is_some())?;
        let mut ep = tonic::transport::Endpoint::from_shared(url.clone())
            .map_err(|e| Failure::Usage(format!("--server {url}: {e}")))?;
        if let Some(tls) = &self.tls {
            ep = ep.tls_config(tls.clone()).map_err(|e| Failure::Usage(format!("TLS settings: {e}")))?;
        }
        // Connecting: --timeout (at least a second: a loopback connect takes far less, a
        // remote one may take more), else CONNECT_TIMEOUT, so a host that takes the connection
        // and never answers, or drops the packets, cannot hold the command forever.
        let connect = self.timeout.map_or(CONNECT_TIMEOUT, |t| t.max(std::time::Duration::from_secs(1)));
        ep = ep.connect_timeout(connect);
        if let Some(t) = limit {
            ep = ep.timeout(t);
        }
        let channel = ep.connect().await.map_err(|e| {
            Failure::Connect(format!("cannot reach the jetloop server at {url}: {}", error_chain(&e)))
        })?;
        Ok(tonic::service::interceptor::InterceptedService::new(channel, self.bearer.clone()))
    }
}

/// Time a call (not a stream) may take when --timeout is not given: above the server's own
/// default limit (60 s) and any sweep or fit it allows, so it only ends calls to a server that
/// took the connection and never answers.
pub(crate) const DEFAULT_CALL_LIMIT: std::time::Duration = std::time::Duration::from_secs(600);

/// Time allowed to connect when --timeout is not given.
pub(crate) const CONNECT_TIMEOUT: std::time::Duration = std::time::Duration::from_secs(5);

/// The URL to connect to: `--server` as `host:port`, `http://host:port` or `https://host:port`;
/// without a scheme, `https://` with TLS settings and `http://` without; `http://` with TLS
/// settings is upgraded to `https://`.
///
/// # Errors
/// [`Failure::Usage`] for `https://` without TLS settings (no CA to check the server with).
pub(crate) fn endpoint_url(server: &str, tls: bool) -> Result<String, Failure> {
    let server = server.trim();
    let (scheme, rest) = match server.split_once("://") {
        Some((scheme, rest)) => (Some(scheme.to_ascii_lowercase()), rest),
        None => (None, server),
    };
    match (scheme.as_deref(), tls) {
        (Some("https"), false) => Err(Failure::Usage(format!(
            "--server {server}: give --ca-file (the CA the server's certificate chains to) for TLS"
        ))),
        (Some("http") | Some("https") | None, true) => Ok(format!("https://{rest}")),
        (Some("http") | None, false) => Ok(format!("http://{rest}")),
        (Some(other), _) => Err(Failure::Usage(format!(
            "--server {server}: the scheme {other}:// is not one jetloop speaks; give host:port, \
             http://host:port or https://host:port"
        ))),
    }
}

/// An error with its causes, outermost first ("transport error: Connection refused (os error
/// 111)"), so a failed connection says why.
fn error_chain(e: &dyn std::error::Error) -> String {
    let mut text = e.to_string();
    let mut source = e.source();
    while let Some(s) = source {
        let more = s.to_string();
        if !text.contains(&more) {
            text.push_str(": ");
            text.push_str(&more);
        }
        source = s.source();
    }
    text
}

#[cfg(test)]
mod tests {
    //! Global flags -> connection settings, without a server.

    use super::*;

    #[test]
    fn the_time_limit_is_in_seconds_and_refused_outside_its_range() {
        assert_eq!(time_limit(None).expect("none"), None);
        assert_eq!(time_limit(Some(2.5)).expect("some"), Some(std::time::Duration::from_millis(2500)));
        for bad in [0.0, -1.0, 2e6] {
            let e = time_limit(Some(bad)).unwrap_err();
            assert!(matches!(e, Failure::Usage(ref m) if m.contains("give seconds in (0, 1e6]")), "{e:?}");
        }
    }

    #[test]
    fn the_token_is_the_first_line_that_is_not_a_comment() {
        let f = std::env::temp_dir().join(format!("jetloop-token-{}", std::process::id()));
        std::fs::write(&f, "# rig token\n\n  s3cret-token-0123  \nsecond\n").expect("write");
        let Bearer(Some(v)) = bearer(Some(&f)).expect("bearer") else { panic!("no token") };
        assert_eq!(v.to_str().ok(), Some("Bearer s3cret-token-0123"));
        let _ = std::fs::remove_file(&f);
        let e = bearer(Some(std::path::Path::new("/nonexistent/token"))).unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("cannot read the token file")), "{e:?}");
    }

    #[test]
    fn an_https_address_without_a_ca_file_is_refused_before_connecting() {
        let ctx =
            Ctx::from_flags(Flags { server: "https://rig:50051".into(), ..Flags::default() }).expect("ctx");
        assert!(ctx.tls.is_none());
        let rt = tokio::runtime::Builder::new_current_thread().enable_all().build().expect("runtime");
        let e = rt.block_on(ctx.channel()).unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("give --ca-file")), "{e:?}");
        let e = Ctx::from_flags(Flags { timeout_s: Some(0.0), ..Flags::default() }).unwrap_err();
        assert!(matches!(e, Failure::Usage(_)), "{e:?}");
    }

    #[test]
    fn a_server_address_with_or_without_a_scheme() {
        assert_eq!(endpoint_url("127.0.0.1:50051", false).expect("url"), "http://127.0.0.1:50051");
        assert_eq!(endpoint_url("http://rig:50051", false).expect("url"), "http://rig:50051");
        assert_eq!(endpoint_url("rig:50051", true).expect("url"), "https://rig:50051");
        assert_eq!(endpoint_url("http://rig:50051", true).expect("url"), "https://rig:50051");
        assert!(matches!(endpoint_url("https://rig:50051", false), Err(Failure::Usage(_))));
        let e = endpoint_url("grpc://rig:50051", false).unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("grpc://")), "{e:?}");
    }

    #[test]
    fn a_refused_connection_says_where_and_why() {
        // A port nobody listens on: bind one and close it again.
        let port =
            std::net::TcpListener::bind("127.0.0.1:0").expect("bind").local_addr().expect("addr").port();
        let ctx =
            Ctx::from_flags(Flags { server: format!("127.0.0.1:{port}"), ..Flags::default() }).expect("ctx");
        let rt = tokio::runtime::Builder::new_current_thread().enable_all().build().expect("runtime");
        let e = rt.block_on(ctx.channel()).unwrap_err();
        let Failure::Connect(m) = e else { panic!("{e:?}") };
        assert!(m.contains(&format!("http://127.0.0.1:{port}")), "{m}");
        assert!(m.to_lowercase().contains("refused"), "{m}");
    }
}
