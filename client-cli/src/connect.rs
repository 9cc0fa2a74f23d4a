//! The connection to the server: address, TLS (and client certificates), bearer token and
//! the call time limit, from the global flags.

use crate::failure::Failure;

/// Where the server is; commands connect when they need it (`synth` never does).
#[derive(Debug)]
pub(crate) struct Ctx {
    server: String,
    timeout: Option<std::time::Duration>,
    bearer: Bearer,
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

/// The bearer token from `--token-file` or `JETLOOP_TOKEN`.
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

/// The TLS settings of `--ca-file` and, for mutual TLS, `--client-cert` / `--client-key`.
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

impl Ctx {
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
        let url = &self.server;
        let tls_url;
        let url = match (&self.tls, url.strip_prefix("http://")) {
            (Some(_), Some(rest)) => {
                tls_url = format!("https://{rest}");
                &tls_url
            }
            (None, _) if url.starts_with("https://") => {
                return Err(Failure::Usage(format!(
                    "--server {url}: give --ca-file (the CA the server's certificate chains to) for TLS"
                )))
            }
            _ => url,
        };
        let mut ep = tonic::transport::Endpoint::from_shared(url.clone())
            .map_err(|e| Failure::Usage(format!("--server {url}: {e}")))?;
        if let Some(tls) = &self.tls {
            ep = ep.tls_config(tls.clone()).map_err(|e| Failure::Usage(format!("TLS settings: {e}")))?;
        }
        if let Some(t) = self.timeout {
            // Connecting gets at least a second whatever the call's limit (a loopback connect
            // takes far less, a remote one may take more).
            ep = ep.timeout(t).connect_timeout(t.max(std::time::Duration::from_secs(1)));
        }
        let channel = ep
            .connect()
            .await
            .map_err(|e| Failure::Connect(format!("cannot reach the jetloop server at {url}: {e}")))?;
        Ok(tonic::service::interceptor::InterceptedService::new(channel, self.bearer.clone()))
    }
}
