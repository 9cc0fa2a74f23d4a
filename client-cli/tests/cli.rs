//! The `jetloop` binary against a real server on a loopback socket: JSON output, CSV files,
//! exit codes.

use jetloop_tests::TestServer;
use std::process::{Command, Output};

fn jetloop(server: &str, args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_jetloop"))
        .arg("--server")
        .arg(server)
        .args(args)
        .output()
        .expect("run jetloop")
}

fn json(o: &Output) -> serde_json::Value {
    assert!(o.status.success(), "stderr: {}", String::from_utf8_lossy(&o.stderr));
    serde_json::from_slice(&o.stdout).expect("JSON on stdout")
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn cli_answers_with_units_json_csv_and_exit_codes() {
    let server = TestServer::start().await;
    let url = server.url();
    let u = url.clone();
    let (jet, table, bad, sweep_csv, screech) = tokio::task::spawn_blocking(move || {
        let jet = jetloop(&u, &["--json", "jet", "--diameter-m", "0.0254", "--npr", "4"]);
        let table = jetloop(&u, &["jet", "--diameter-m", "0.0254", "--npr", "4"]);
        let bad = jetloop(&u, &["jet", "--diameter-m", "-1", "--npr", "0.5"]);
        let dir = std::env::temp_dir().join(format!("jetloop-cli-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let csv = dir.join("sweep.csv");
        let s = jetloop(
            &u,
            &[
                "sweep",
                "--diameter-m",
                "0.0254",
                "--npr",
                "3",
                "--vary",
                "npr",
                "--from",
                "1.5",
                "--to",
                "5",
                "--count",
                "8",
                "--csv",
                csv.to_str().unwrap(),
            ],
        );
        assert!(s.status.success(), "{}", String::from_utf8_lossy(&s.stderr));
        let sweep_csv = std::fs::read_to_string(&csv).unwrap();
        let screech = jetloop(&u, &["--json", "screech", "--mj", "1.5", "--dj-m", "0.02"]);
        (jet, table, bad, sweep_csv, screech)
    })
    .await
    .unwrap();
    // Mj = sqrt(5 (4^(2/7) - 1)) (closed form).
    let j = json(&jet);
    assert!((j["fully_expanded_mach_number"].as_f64().unwrap() - 1.558_836_568).abs() < 1e-9);
    assert_eq!(j["regime"], "under-expanded");
    let t = String::from_utf8_lossy(&table.stdout);
    assert!(t.contains("m/s") && t.contains("kg/s") && t.contains("140 dB"), "{t}");
    assert_eq!(bad.status.code(), Some(4));
    let e = String::from_utf8_lossy(&bad.stderr);
    assert!(e.contains("exit_diameter_m") && e.contains("nozzle_pressure_ratio"), "{e}");
    let lines: Vec<&str> = sweep_csv.lines().collect();
    assert_eq!(lines.len(), 9);
    assert!(lines[0].starts_with("nozzle_pressure_ratio_swept,"));
    assert!(lines[1].contains(",subsonic,"));
    let s = json(&screech);
    assert!(s["predictions"].as_array().unwrap().len() >= 2);
    server.stop().await;

    let gone = tokio::task::spawn_blocking(move || jetloop(&url, &["info"])).await.unwrap();
    assert_eq!(gone.status.code(), Some(3));
}
