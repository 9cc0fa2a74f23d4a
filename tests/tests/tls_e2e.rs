//! TLS and mutual TLS over a real socket, with certificates generated in the test (rcgen):
//! a client trusting the right CA is answered, one trusting another CA or speaking plaintext is
//! not; with a client CA configured, a client without a certificate or with one from another CA
//! cannot call, one with a certificate from the CA can. TLS and a bearer token together: the
//! token is still checked.

use jetloop_proto::pb::{self, info_service_client::InfoServiceClient};
use jetloop_server::config::{ServeOptions, TlsFiles};
use jetloop_tests::TestServer;
use rcgen::{BasicConstraints, CertificateParams, CertifiedIssuer, DnType, IsCa, KeyPair};
use tonic::transport::{Certificate, ClientTlsConfig, Endpoint, Identity};

/// A certificate authority made for one test.
struct Ca {
    issuer: CertifiedIssuer<'static, KeyPair>,
}

impl Ca {
    fn new(name: &str) -> Self {
        let mut params = CertificateParams::new(Vec::<String>::new()).expect("params");
        params.is_ca = IsCa::Ca(BasicConstraints::Unconstrained);
        params.distinguished_name.push(DnType::CommonName, name);
        let key = KeyPair::generate().expect("key");
        Ca { issuer: CertifiedIssuer::self_signed(params, key).expect("CA certificate") }
    }

    fn pem(&self) -> String {
        self.issuer.pem()
    }

    /// A leaf certificate for `names` (DNS names or IP addresses), PEM certificate and key.
    fn leaf(&self, names: &[&str]) -> (String, String) {
        let params =
            CertificateParams::new(names.iter().map(|s| s.to_string()).collect::<Vec<_>>()).expect("params");
        let key = KeyPair::generate().expect("key");
        let cert = params.signed_by(&key, &self.issuer).expect("leaf certificate");
        (cert.pem(), key.serialize_pem())
    }
}

fn server_files(ca: &Ca, client_ca: Option<&Ca>) -> TlsFiles {
    let (cert, key) = ca.leaf(&["localhost", "127.0.0.1"]);
    TlsFiles {
        cert_pem: cert.into_bytes(),
        key_pem: key.into_bytes(),
        client_ca_pem: client_ca.map(|c| c.pem().into_bytes()),
    }
}

/// `ServerInfo` over TLS trusting `trust`, presenting `identity`: Ok, or the error text.
async fn call(server: &TestServer, trust: &Ca, identity: Option<(String, String)>) -> Result<(), String> {
    let mut tls = ClientTlsConfig::new().ca_certificate(Certificate::from_pem(trust.pem()));
    if let Some((cert, key)) = identity {
        tls = tls.identity(Identity::from_pem(cert, key));
    }
    let url = server.url().replace("http://", "https://");
    let ep =
        Endpoint::from_shared(url).map_err(|e| e.to_string())?.tls_config(tls).map_err(|e| e.to_string())?;
    server_info(ep).await
}

/// Connects through `ep` (10 s limits) and calls `ServerInfo`: Ok, or the error text.
async fn server_info(ep: Endpoint) -> Result<(), String> {
    let ep =
        ep.timeout(std::time::Duration::from_secs(10)).connect_timeout(std::time::Duration::from_secs(10));
    let channel = ep.connect().await.map_err(|e| format!("connect: {e:?}"))?;
    InfoServiceClient::new(channel)
        .server_info(pb::ServerInfoRequest {})
        .await
        .map(|_| ())
        .map_err(|e| format!("call: {e:?}"))
}

/// A plaintext HTTP/2 call to a TLS port.
async fn plaintext_call(server: &TestServer) -> Result<(), String> {
    server_info(Endpoint::from_shared(server.url()).map_err(|e| e.to_string())?).await
}

#[tokio::test]
async fn tls_answers_a_client_that_trusts_its_ca_and_no_other() {
    let ca = Ca::new("jetloop test CA");
    let other = Ca::new("some other CA");
    let server = TestServer::start_with_options(ServeOptions {
        tls: Some(server_files(&ca, None)),
        ..ServeOptions::default()
    })
    .await;
    call(&server, &ca, None).await.expect("a client trusting the CA is answered");
    let e = call(&server, &other, None).await.expect_err("a client trusting another CA must fail");
    assert!(e.to_lowercase().contains("certificate") || e.contains("UnknownIssuer"), "{e}");
    plaintext_call(&server).await.expect_err("plaintext to a TLS port must fail");
    server.stop().await;
}

#[tokio::test]
async fn mutual_tls_needs_a_client_certificate_from_the_client_ca() {
    let ca = Ca::new("jetloop test CA");
    let clients = Ca::new("rig client CA");
    let rogue = Ca::new("rogue CA");
    let server = TestServer::start_with_options(ServeOptions {
        tls: Some(server_files(&ca, Some(&clients))),
        ..ServeOptions::default()
    })
    .await;
    call(&server, &ca, Some(clients.leaf(&["daq-pc-3"]))).await.expect("a client certificate from the CA");
    call(&server, &ca, None).await.expect_err("no client certificate must fail");
    call(&server, &ca, Some(rogue.leaf(&["daq-pc-3"])))
        .await
        .expect_err("a certificate from another CA must fail");
    // The server still answers after the refused handshakes.
    call(&server, &ca, Some(clients.leaf(&["daq-pc-4"]))).await.expect("still serving");
    server.stop().await;
}

#[tokio::test]
async fn tls_and_tokens_together_still_check_the_token() {
    let ca = Ca::new("jetloop test CA");
    let server = TestServer::start_with_options(ServeOptions {
        tls: Some(server_files(&ca, None)),
        tokens: vec!["lab-7-rig-token-0123456789".into()],
        ..ServeOptions::default()
    })
    .await;
    let e = call(&server, &ca, None).await.expect_err("TLS alone is not the token");
    assert!(e.contains("Unauthenticated"), "{e}");
    server.stop().await;
}
