//! `jetloop check` against a real server: the shipped case files pass, and the suite fails
//! (exit code 6, the failing case named) when a tolerance is tightened past the true deviation
//! or an expected value is wrong.

use jetloop_tests::TestServer;
use std::path::PathBuf;
use std::process::{Command, Output};

fn check(server: &str, files: &[PathBuf]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_jetloop"))
        .arg("--server")
        .arg(server)
        .arg("check")
        .args(files)
        .output()
        .expect("run jetloop check")
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_suite_passes_and_can_fail() {
    let server = TestServer::start().await;
    let url = server.url();
    let data = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../tests/data");
    let shipped: Vec<PathBuf> = std::fs::read_dir(&data)
        .expect("tests/data")
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "toml"))
        .collect();
    assert!(shipped.len() >= 2);
    let dir = std::env::temp_dir().join(format!("jetloop-check-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temp dir");
    let text = std::fs::read_to_string(data.join("gas-dynamics.toml")).expect("case file");
    // NACA 1135 prints p/p0 = 0.12780 at M = 2; the exact value is 0.1278045: a relative
    // tolerance of 1e-9 is tighter than the table's rounding.
    let tight = dir.join("tight.toml");
    std::fs::write(&tight, text.replacen("rel_tolerance = 5e-5", "rel_tolerance = 1e-9", 1)).expect("write");
    let wrong = dir.join("wrong.toml");
    std::fs::write(&wrong, text.replacen("value = 0.57735", "value = 0.58735", 1)).expect("write");
    let (ok, t, w) = tokio::task::spawn_blocking(move || {
        (check(&url, &shipped), check(&url, &[tight]), check(&url, &[wrong]))
    })
    .await
    .expect("runs");
    let out = |o: &Output| String::from_utf8_lossy(&o.stdout).to_string();
    assert_eq!(ok.status.code(), Some(0), "{}{}", out(&ok), String::from_utf8_lossy(&ok.stderr));
    assert!(out(&ok).contains(" 0 failed"), "{}", out(&ok));
    assert_eq!(t.status.code(), Some(6), "{}", out(&t));
    assert!(
        out(&t).contains("FAILED") && out(&t).contains("isentropic flow, M = 2, gamma 1.4"),
        "{}",
        out(&t)
    );
    assert!(out(&t).contains("1 failed"), "{}", out(&t));
    assert_eq!(w.status.code(), Some(6), "{}", out(&w));
    assert!(
        out(&w).contains("normal shock, M1 = 2") && out(&w).contains("downstream_mach_number"),
        "{}",
        out(&w)
    );
    let _ = std::fs::remove_dir_all(&dir);
    server.stop().await;
}
