//! CSV recordings as labs export them, through the `jetloop` binary and a real server:
//! semicolons with decimal commas, tabs, quoted header names, a time column giving the sample
//! rate, and the files that must be refused (exit code 2, the row or counts named).
//!
//! References: a sine of amplitude A has an rms of A / sqrt(2) over whole periods, and its
//! tone sits at its own frequency (closed forms); the samples are written here with Rust's
//! float formatting, the time stamps as i / fs.

use jetloop_tests::TestServer;
use std::f64::consts::PI;
use std::path::Path;
use std::process::{Command, Output};

/// Samples per second and tone frequency of every file (1 s: whole periods).
const FS: f64 = 20_000.0;
const F: f64 = 1_000.0;

fn jetloop(server: &str, args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_jetloop"))
        .arg("--server")
        .arg(server)
        .args(args)
        .output()
        .expect("run jetloop")
}

/// Rows of (t, 2 sin, 0.5 cos) at FS, `n` of them.
fn rows(n: usize) -> Vec<[f64; 3]> {
    (0..n)
        .map(|i| {
            let t = i as f64 / FS;
            [t, 2.0 * (2.0 * PI * F * t).sin(), 0.5 * (2.0 * PI * F * t).cos()]
        })
        .collect()
}

/// Writes `text` to a fresh file `name` and gives its path as text.
fn file(dir: &Path, name: &str, text: &str) -> String {
    let p = dir.join(name);
    std::fs::write(&p, text).expect("write");
    p.to_str().expect("utf-8 path").to_string()
}

/// The channels of a `--json tones` answer: (name, rms in Pa, strongest tone in Hz).
fn channels(o: &Output) -> Vec<(String, f64, f64)> {
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).expect("JSON");
    v["summary"]
        .as_array()
        .expect("summary table")
        .iter()
        .map(|c| {
            (
                c["channel"].as_str().unwrap_or_default().to_string(),
                c["rms_pa"].as_f64().unwrap_or(f64::NAN),
                c["strongest_tone_hz"].as_f64().unwrap_or(f64::NAN),
            )
        })
        .collect()
}

/// A refusal: exit code 2 and the message on standard error.
fn refused(o: &Output) -> String {
    assert_eq!(o.status.code(), Some(2), "{}", String::from_utf8_lossy(&o.stdout));
    String::from_utf8_lossy(&o.stderr).to_string()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn csv_exports_are_read_as_written_and_bad_ones_refused() {
    let server = TestServer::start().await;
    let u = server.url();
    tokio::task::spawn_blocking(move || {
        let dir = std::env::temp_dir().join(format!("jetloop-csv-recordings-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let data = rows(20_000);
        // A European export: semicolons, decimal commas, a quoted name holding the delimiter,
        // a time column in seconds; no --sample-rate-hz.
        let mut eu = String::from("# rig 2, run 14\nZeit [s];\"p1; mic \"\"A\"\" [Pa]\";p2 [Pa]\n");
        for r in &data {
            eu.push_str(&format!("{:.9};{:.9};{:.9}\n", r[0], r[1], r[2]).replace('.', ","));
        }
        let eu_path = file(&dir, "eu.csv", &eu);
        let o = jetloop(&u, &["--json", "tones", &eu_path, "--in-pascals"]);
        let got = channels(&o);
        let names: Vec<&str> = got.iter().map(|c| c.0.as_str()).collect();
        assert_eq!(names, ["p1; mic \"A\" [Pa]", "p2 [Pa]"], "the time column is not a channel");
        // rms of A sin over whole periods = A / sqrt(2) (closed form); 1e-6 relative covers the
        // 9 printed decimals.
        for ((_, rms, tone), a) in got.iter().zip([2.0, 0.5]) {
            assert!((rms - a / 2f64.sqrt()).abs() < 1e-6 * a, "{rms} for amplitude {a}");
            // The rate came from the time column: the tone is at F (a rate off by 20 % would put
            // it 200 Hz away).
            assert!((tone - F).abs() < 10.0, "{tone}");
        }
        let note = String::from_utf8_lossy(&o.stderr);
        assert!(note.contains("delimiter ';', decimal comma; time column 1 'Zeit [s]'"), "{note}");
        // The same rate given: accepted; a contradicting one: refused, both values named.
        assert!(jetloop(&u, &["--json", "tones", &eu_path, "--in-pascals", "--sample-rate-hz", "20000"])
            .status
            .success());
        let e = refused(&jetloop(&u, &["tones", &eu_path, "--in-pascals", "--sample-rate-hz", "25000"]));
        assert!(e.contains("--sample-rate-hz 25000 disagrees"), "{e}");
        let derived: f64 = e
            .split("which gives ")
            .nth(1)
            .and_then(|rest| rest.split(" Hz").next())
            .and_then(|x| x.parse().ok())
            .unwrap_or(f64::NAN);
        assert!((derived - FS).abs() < 1e-3, "{e}");

        // Tabs, a quoted header with commas, no time column: the rate is given.
        let mut tab = String::from("\"mic, 0 deg\"\t\"mic, 90 deg\"\n");
        for r in &data {
            tab.push_str(&format!("{}\t{}\n", r[1], r[2]));
        }
        let tab_path = file(&dir, "tab.txt", &tab);
        let got = channels(&jetloop(
            &u,
            &["--json", "tones", &tab_path, "--in-pascals", "--sample-rate-hz", "20000"],
        ));
        assert_eq!(got[0].0, "mic, 0 deg");
        assert!((got[0].1 - 2.0 / 2f64.sqrt()).abs() < 1e-9, "{}", got[0].1);
        assert!((got[1].1 - 0.5 / 2f64.sqrt()).abs() < 1e-9, "{}", got[1].1);

        // Sample 100 (from 0) missing from the time column: refused, naming the row after the
        // gap (row 1 is the header: samples 0 to 99 are rows 2 to 101, sample 101 row 102).
        let mut gap = String::from("time_s,p_pa\n");
        for (_, r) in data.iter().enumerate().filter(|(i, _)| *i != 100) {
            gap.push_str(&format!("{},{}\n", r[0], r[1]));
        }
        let e = refused(&jetloop(&u, &["tones", &file(&dir, "gap.csv", &gap), "--in-pascals"]));
        assert!(
            e.contains("is not uniform: row 102 is 1e-4 s after the row before, the usual step is 5e-5 s"),
            "{e}"
        );
        // A header of three names over rows of two cells.
        let e = refused(&jetloop(
            &u,
            &[
                "tones",
                &file(&dir, "wide.csv", "a,b,c\n1,2\n3,4\n"),
                "--in-pascals",
                "--sample-rate-hz",
                "1000",
            ],
        ));
        assert!(e.contains("has 3 column(s) but the data rows have 2"), "{e}");
        // A decimal point in a file of decimal commas.
        let e = refused(&jetloop(
            &u,
            &[
                "tones",
                &file(&dir, "mixed.csv", "p1;p2\n0,5;1,5\n0,25;1.25\n"),
                "--in-pascals",
                "--sample-rate-hz",
                "1000",
            ],
        ));
        assert!(e.contains("row 3, column 2 (B, 'p2'): '1.25' uses a decimal point"), "{e}");
        let _ = std::fs::remove_dir_all(dir);
    })
    .await
    .unwrap();
}
