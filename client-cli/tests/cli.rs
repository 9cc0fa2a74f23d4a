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
        // The points went to the file: one summary line on standard output.
        let out = String::from_utf8_lossy(&s.stdout);
        assert_eq!(out.lines().count(), 1, "{out}");
        assert!(out.contains("8 points written to"), "{out}");
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
    // The swept NPR is the NPR column (no second NPR column), then Mj and the regime.
    assert!(lines[0].starts_with("nozzle_pressure_ratio,fully_expanded_mach_number,regime,"), "{}", lines[0]);
    assert!(lines[1].contains(",subsonic,"));
    // --timeout: a call that cannot finish in time ends with exit code 5 and says so.
    let u2 = server.url();
    // (Guided-mode dispersion curves take tens of milliseconds, far beyond 1 ms; a quick call
    // such as `info` can finish inside the client's first timer tick.)
    let late = tokio::task::spawn_blocking(move || {
        jetloop(&u2, &["--timeout", "0.001", "modes", "--mj", "1.3", "--t0-over-ta", "1"])
    })
    .await
    .expect("runs");
    assert_eq!(late.status.code(), Some(5));
    assert!(String::from_utf8_lossy(&late.stderr).contains("--timeout"));
    let s = json(&screech);
    assert!(s["predictions"].as_array().unwrap().len() >= 2);
    server.stop().await;

    let gone = tokio::task::spawn_blocking(move || jetloop(&url, &["info"])).await.unwrap();
    assert_eq!(gone.status.code(), Some(3));
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn synth_wav_then_tones_finds_the_screech_family() {
    let server = TestServer::start().await;
    let u = server.url();
    let out = tokio::task::spawn_blocking(move || {
        let dir = std::env::temp_dir().join(format!("jetloop-synth-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let wav = dir.join("demo.wav");
        let svg = dir.join("demo.svg");
        let s = Command::new(env!("CARGO_BIN_EXE_jetloop"))
            .args([
                "synth",
                wav.to_str().unwrap(),
                "--seconds",
                "1",
                "--screech-hz",
                "4800",
                "--screech-db",
                "142",
            ])
            .output()
            .unwrap();
        assert!(s.status.success(), "{}", String::from_utf8_lossy(&s.stderr));
        let no_cal = jetloop(&u, &["tones", wav.to_str().unwrap()]);
        let t = jetloop(
            &u,
            &[
                "--json",
                "tones",
                wav.to_str().unwrap(),
                "--pa-per-unit",
                "2000",
                "--predicted-hz",
                "4700",
                "--plot",
                svg.to_str().unwrap(),
            ],
        );
        // The same file sent in blocks of 64 KiB (ExtractTonesStream).
        let blocks = jetloop(
            &u,
            &["--json", "tones", wav.to_str().unwrap(), "--pa-per-unit", "2000", "--block-bytes", "65536"],
        );
        let csv = dir.join("two.csv");
        let mut text = String::from("mic_a,mic_b\n");
        for i in 0..20_000 {
            let x = (2.0 * std::f64::consts::PI * 1000.0 * f64::from(i) / 20_000.0).sin();
            text.push_str(&format!("{x},{}\n", 0.5 * x));
        }
        std::fs::write(&csv, text).unwrap();
        // CSV and raw input without a calibration are refused like WAV (no pascals assumed).
        let csv_no_cal = jetloop(&u, &["bands", csv.to_str().unwrap(), "--sample-rate-hz", "20000"]);
        assert_eq!(csv_no_cal.status.code(), Some(2), "CSV without calibration is a usage error");
        assert!(String::from_utf8_lossy(&csv_no_cal.stderr).contains("--in-pascals"));
        let b = jetloop(
            &u,
            &["--json", "bands", csv.to_str().unwrap(), "--sample-rate-hz", "20000", "--in-pascals"],
        );
        // Several channels: the analysis settings once and one summary table, not a block per
        // channel.
        let two = jetloop(&u, &["tones", csv.to_str().unwrap(), "--sample-rate-hz", "20000", "--in-pascals"]);
        let text = String::from_utf8_lossy(&two.stdout);
        assert!(two.status.success(), "{}", String::from_utf8_lossy(&two.stderr));
        assert_eq!(text.matches("segment length").count(), 1, "{text}");
        assert_eq!(text.matches("\nChannels\n").count(), 1, "{text}");
        assert!(text.contains("mic_a") && text.contains("mic_b"), "{text}");
        // --overlay: both channels in one plot; --linear-frequency: a linear axis (ticks at
        // multiples of 2000 Hz, no "1k" decade labels).
        let ov = dir.join("overlay.svg");
        let o = jetloop(
            &u,
            &[
                "tones",
                csv.to_str().unwrap(),
                "--sample-rate-hz",
                "20000",
                "--in-pascals",
                "--plot",
                ov.to_str().unwrap(),
                "--overlay",
                "--linear-frequency",
            ],
        );
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let svg_ov = std::fs::read_to_string(&ov).unwrap();
        assert!(svg_ov.contains("mic_a PSD") && svg_ov.contains("mic_b PSD"), "{svg_ov}");
        assert!(svg_ov.contains(">2000<") && !svg_ov.contains(">1k<"));
        assert!(!dir.join("overlay-ch0.svg").exists());
        let svg_text = std::fs::read_to_string(&svg).unwrap_or_default();
        (no_cal, t, b, svg_text, blocks)
    })
    .await
    .unwrap();
    let (no_cal, t, b, svg, blocks) = out;
    assert_eq!(no_cal.status.code(), Some(2), "WAV without calibration is a usage error");
    let top = json(&t);
    let j = &top["channels"][0];
    let fam = &j["families"][0];
    assert!((fam["fundamental_hz"].as_f64().unwrap() - 4800.0).abs() < 0.5, "{fam}");
    // The fundamental was written at 142 dB re 20 uPa (demo generator): the extracted level
    // agrees within 0.2 dB, and the caution appears above 140 dB.
    let lvl = j["tones"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["level_db"].as_f64().unwrap())
        .fold(f64::MIN, f64::max);
    assert!((lvl - 142.0).abs() < 0.2, "{lvl}");
    assert!(j["caution"].as_str().unwrap().contains("140 dB"));
    assert!(j["predicted_match"].as_str().unwrap().contains("matched"));
    assert!(svg.starts_with("<svg") && svg.contains("4800 Hz"));
    // Blocks give the same tones as one request.
    let jb = json(&blocks);
    let (a, b_) = (&jb["channels"][0]["tones"], &j["tones"]);
    assert_eq!(a.as_array().unwrap().len(), b_.as_array().unwrap().len());
    for (x, y) in a.as_array().unwrap().iter().zip(b_.as_array().unwrap()) {
        let (fx, fy) = (x["frequency_hz"].as_f64().unwrap(), y["frequency_hz"].as_f64().unwrap());
        assert!((fx - fy).abs() < 1e-9 * fy, "{x} {y}");
    }
    let jb = json(&b);
    // 1 kHz sine of amplitude 1 Pa -> 90.97 dB in the 1 kHz band (closed form: 10 log10(0.5/4e-10));
    // the second column is half the amplitude, 6.02 dB lower.
    for (ch, want) in [(0, 90.969), (1, 84.949)] {
        let c = &jb["channels"][ch];
        let band = c["bands"].as_array().unwrap().iter().find(|x| x["nominal_hz"] == 1000.0).unwrap();
        assert!((band["level_db"].as_f64().unwrap() - want).abs() < 0.1, "{band}");
    }
    assert_eq!(jb["channels"][1]["channel"], "mic_b");
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn fit_reads_the_demo_sweep_and_reports_hysteresis() {
    let server = TestServer::start().await;
    let u = server.url();
    let out = tokio::task::spawn_blocking(move || {
        let csv = concat!(env!("CARGO_MANIFEST_DIR"), "/../sample-data/npr-sweep-up-down.csv");
        let svg = std::env::temp_dir().join(format!("jetloop-fit-{}.svg", std::process::id()));
        let o = jetloop(
            &u,
            &[
                "--json",
                "fit",
                csv,
                "--control",
                "npr",
                "--diameter-m",
                "0.0254",
                "--source-cells",
                "4",
                "--plot",
                svg.to_str().unwrap(),
            ],
        );
        (o, std::fs::read_to_string(&svg).unwrap_or_default())
    })
    .await
    .unwrap();
    let j = json(&out.0);
    assert_eq!(j["stages"].as_array().unwrap().len(), 3);
    let h = &j["hysteresis"][0];
    // The demo sweep jumps up at NPR 3.10-3.15 and back down at 2.90-2.85.
    assert!(
        (h["x_low"].as_f64().unwrap() - 2.875).abs() < 0.03
            && (h["x_high"].as_f64().unwrap() - 3.125).abs() < 0.03,
        "{h}"
    );
    assert!(out.1.contains("nozzle pressure ratio"));
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn calibrate_writes_a_file_that_tones_reads_back_at_the_calibrator_level() {
    // Two invented microphones of 50 and 3.16 mV/Pa on a 94 dB, 1 kHz calibrator, recorded in
    // volts as raw f32 at 48 kHz: V_rms = S x 20e-6 x 10^(94/20) Pa (closed form, ISO 1683).
    let server = TestServer::start().await;
    let u = server.url();
    let (cal, tones, toml) = tokio::task::spawn_blocking(move || {
        let dir = std::env::temp_dir().join(format!("jetloop-calibrate-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let rec = dir.join("calibrator.bin");
        let p = 20e-6 * 10f64.powf(94.0 / 20.0);
        let bytes: Vec<u8> = (0..2 * 48_000)
            .flat_map(|i| {
                let x =
                    2f64.sqrt() * p * (2.0 * std::f64::consts::PI * 1000.0 * f64::from(i) / 48_000.0).sin();
                [50e-3, 3.16e-3].map(|s| ((s * x) as f32).to_le_bytes())
            })
            .flatten()
            .collect();
        std::fs::write(&rec, bytes).unwrap();
        let out = dir.join("mics.toml");
        let (r, o) = (rec.to_str().unwrap(), out.to_str().unwrap());
        let cal = jetloop(
            &u,
            &[
                "--json",
                "calibrate",
                r,
                "--sample-rate-hz",
                "48000",
                "--channels",
                "2",
                "--level-db",
                "94",
                "--frequency-hz",
                "1000",
                "--volts-per-unit",
                "1",
                "--names",
                "mic a,mic b",
                "-o",
                o,
            ],
        );
        // The same recording analysed through the written file: every channel reads 94 dB.
        let tones = jetloop(
            &u,
            &["--json", "tones", r, "--sample-rate-hz", "48000", "--channels", "2", "--calibration-file", o],
        );
        let toml = std::fs::read_to_string(&out).unwrap_or_default();
        let _ = std::fs::remove_dir_all(dir);
        (cal, tones, toml)
    })
    .await
    .unwrap();
    let c = json(&cal);
    let rows = c["channels"].as_array().expect("channel rows");
    assert_eq!(rows.len(), 2, "{c}");
    for (row, s) in rows.iter().zip([50.0, 3.16]) {
        let got = row["sensitivity_mv_per_pa"].as_f64().expect("sensitivity");
        assert!((20.0 * (got / s).log10()).abs() < 0.05, "{got} mV/Pa against {s}");
    }
    assert!(toml.contains("name = \"mic b\"") && toml.contains("volts_per_unit = 1.0"), "{toml}");
    let t = json(&tones);
    let chans = t["channels"].as_array().expect("channels");
    assert_eq!(chans.len(), 2, "{t}");
    for ch in chans {
        let top = ch["tones"]
            .as_array()
            .expect("tones")
            .iter()
            .filter_map(|x| x["level_db"].as_f64())
            .fold(f64::MIN, f64::max);
        // 20 log10(1.0024 / 20e-6) = 94.0 dB (the stated level, closed form).
        assert!((top - 94.0).abs() < 0.05, "{ch}");
    }
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_ring_streamed_from_disk_gives_the_cross_analysis_of_one_request() {
    // Four microphones at 0, 90, 180 and 270 degrees, a 3 kHz pattern 10 cos(omega t - theta_j)
    // Pa spinning towards increasing azimuth, 2 s of f32 frames at 51.2 kHz in a raw file.
    let server = TestServer::start().await;
    let u = server.url();
    let (streamed, whole) = tokio::task::spawn_blocking(move || {
        let dir = std::env::temp_dir().join(format!("jetloop-ring-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let raw = dir.join("ring.f32");
        let mut rng = jetloop_tests::signals::XorShift::new(0x3c6e_f372_fe94_f82b);
        let mut bytes = Vec::new();
        for i in 0..102_400 {
            let t = f64::from(i) / 51_200.0;
            for j in 0..4 {
                let th = std::f64::consts::FRAC_PI_2 * f64::from(j);
                let v = 10.0 * (2.0 * std::f64::consts::PI * 3000.0 * t - th).cos() + rng.centered();
                bytes.extend_from_slice(&(v as f32).to_le_bytes());
            }
        }
        std::fs::write(&raw, bytes).unwrap();
        let args = |extra: &[&'static str]| {
            let mut a = vec![
                "--json",
                "tones",
                raw.to_str().unwrap(),
                "--input-kind",
                "raw",
                "--raw-format",
                "f32",
                "--channels",
                "4",
                "--sample-rate-hz",
                "51200",
                "--in-pascals",
                "--segment",
                "4096",
                "--azimuths-deg",
                "0,90,180,270",
            ]
            .into_iter()
            .map(String::from)
            .collect::<Vec<_>>();
            a.extend(extra.iter().map(|s| s.to_string()));
            a
        };
        let run = |a: Vec<String>| jetloop(&u, &a.iter().map(String::as_str).collect::<Vec<_>>());
        // Blocks of 64 KiB read from disk (ExtractTonesStream, then CrossSpectraStream) against
        // one request of each (1.6 MB, under the 4 MiB at which the client streams by itself).
        let text = run(args(&["--block-bytes", "65536"])[1..].to_vec());
        let shown = String::from_utf8_lossy(&text.stdout);
        assert!(shown.contains("sent in") && shown.contains("cross-channel"), "{shown}");
        (run(args(&["--block-bytes", "65536"])), run(args(&[])))
    })
    .await
    .unwrap();
    let (js, jw) = (json(&streamed), json(&whole));
    let cross = |j: &serde_json::Value| {
        j["channels"]
            .as_array()
            .unwrap()
            .iter()
            .find_map(|c| c.get("cross_tones").cloned())
            .expect("a cross-channel table")
    };
    let (xs, xw) = (cross(&js), cross(&jw));
    let (rs, rw) = (&xs[0], &xw[0]);
    // The same estimate summed in another order: equal to rounding, and the same printed
    // phases, coherences and mode.
    assert_eq!((&rs["channels"], &rs["mode"]), (&rw["channels"], &rw["mode"]), "{xs} vs {xw}");
    let level = |r: &serde_json::Value| r["level_db"].as_f64().unwrap();
    assert!((level(rs) - level(rw)).abs() < 1e-9, "{xs} vs {xw}");
    assert!((rs["frequency_hz"].as_f64().unwrap() - 3000.0).abs() < 12.5, "{rs}");
    // Closed form from the ring geometry: microphone j at theta_j = 90 j degrees sees the
    // order-1 pattern at -theta_j relative to microphone 0 (conj(X_ref) X_j, the convention of
    // scipy.signal.csd), printed to 0.1 degree: -90, 180, 90.
    assert_eq!(rs["channels"], "1: -90.0 / 1.000; 2: +180.0 / 1.000; 3: +90.0 / 1.000", "{rs}");
    assert!(rs["mode"].as_str().unwrap().starts_with("m = 1 spinning towards increasing azimuth"), "{rs}");
    server.stop().await;
}
