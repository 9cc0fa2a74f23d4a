//! The `jetloop` binary against a real server: a calibration file's per-channel response
//! curve and ring azimuths reach the analysis (the curve adds to that channel's level only; the
//! azimuths let `--cross` name the ring's azimuthal mode without --azimuths-deg).

use jetloop_tests::TestServer;
use std::process::Command;

/// Four microphones on a ring at 0, 90, 180 and 270 deg hearing p_k = A cos(w t - theta_k), a
/// spinning m = 1 mode (A = 2 Pa, 2 kHz), as f32 pascals at 51.2 kHz for 2 s.
fn ring_file(dir: &std::path::Path) -> std::path::PathBuf {
    let fs = 51_200.0;
    let mut bytes = Vec::new();
    for i in 0..(2 * 51_200) {
        let t = f64::from(i) / fs;
        for k in 0..4 {
            let theta = f64::from(k) * std::f64::consts::FRAC_PI_2;
            let v = 2.0 * (2.0 * std::f64::consts::PI * 2000.0 * t - theta).cos();
            bytes.extend_from_slice(&(v as f32).to_le_bytes());
        }
    }
    let f = dir.join("ring.f32");
    std::fs::write(&f, bytes).expect("write recording");
    f
}

/// The first object under `v` holding `key`, searched depth first.
fn find<'a>(v: &'a serde_json::Value, key: &str) -> Option<&'a serde_json::Value> {
    match v {
        serde_json::Value::Object(m) => m.get(key).or_else(|| m.values().find_map(|x| find(x, key))),
        serde_json::Value::Array(a) => a.iter().find_map(|x| find(x, key)),
        _ => None,
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn per_channel_curves_and_azimuths_from_the_calibration_file_reach_the_analysis() {
    let server = TestServer::start().await;
    let url = server.url();
    let out = tokio::task::spawn_blocking(move || {
        let dir = std::env::temp_dir().join(format!("jetloop-calfile-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("dir");
        let rec = ring_file(&dir);
        // A flat +6 dB response correction for the second microphone only, named relative to
        // the calibration file's folder.
        std::fs::write(dir.join("flat6.csv"), "frequency_hz,correction_db\n10,6\n100000,6\n").expect("curve");
        let mut cal = String::new();
        for (k, az) in [0, 90, 180, 270].iter().enumerate() {
            cal += &format!("[[channel]]\nname = \"mic {az} deg\"\npa_per_unit = 1.0\nazimuth_deg = {az}\n");
            if k == 1 {
                cal += "response_curve = \"flat6.csv\"\n";
            }
            cal += "\n";
        }
        std::fs::write(dir.join("ring.toml"), cal).expect("calibration file");
        let o = Command::new(env!("CARGO_BIN_EXE_jetloop"))
            .args(["--server", &url, "--json", "tones"])
            .arg(&rec)
            .args(["--raw-format", "f32", "--channels", "4", "--sample-rate-hz", "51200", "--cross"])
            .arg("--calibration-file")
            .arg(dir.join("ring.toml"))
            .output()
            .expect("run jetloop");
        let _ = std::fs::remove_dir_all(&dir);
        o
    })
    .await
    .expect("join");
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
    let level = |c: usize| v["channels"][c]["tones"][0]["level_db"].as_f64().expect("a tone");
    // Closed form: amplitude 2 Pa -> 20 log10(2 / sqrt 2 / 20 uPa) = 96.99 dB.
    let closed = 20.0 * (2.0 / 2f64.sqrt() / 20e-6).log10();
    for c in [0, 2, 3] {
        assert!((level(c) - closed).abs() < 0.05, "channel {c}: {} vs {closed}", level(c));
    }
    assert!((level(1) - level(0) - 6.0).abs() < 0.01, "the curve adds 6 dB: {} vs {}", level(1), level(0));
    let mode = find(&v, "mode").and_then(|m| m.as_str()).expect("a mode from the file's azimuths");
    assert!(mode.starts_with("m = 1 spinning"), "{mode}");
    server.stop().await;
}
