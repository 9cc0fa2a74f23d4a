//! `jetloop demo` against a real server: the invented scenario end to end, its plots and
//! summary, and the loop orders it was built with recovered by the stage fit.

use jetloop_tests::TestServer;
use std::process::Command;

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_demo_writes_its_plots_and_recovers_the_built_loop_orders() {
    let server = TestServer::start().await;
    let url = server.url();
    let dir = std::env::temp_dir().join(format!("jetloop-demo-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    let d = dir.clone();
    let out = tokio::task::spawn_blocking(move || {
        Command::new(env!("CARGO_BIN_EXE_jetloop"))
            .args(["--server", &url, "--json", "demo", d.to_str().expect("path"), "--small"])
            .output()
            .expect("run demo")
    })
    .await
    .expect("demo");
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let j: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
    assert_eq!(j["loop_orders_recovered"], true, "{j}");
    assert_eq!(j["stages_found"], 3);
    for s in j["stages"].as_array().expect("stages") {
        assert_eq!(s["fitted_loop_order"], s["built_loop_order"], "{s}");
    }
    for f in ["points.csv", "stages.svg", "screech-map.svg", "spectrum.svg", "summary.txt"] {
        assert!(dir.join(f).exists(), "{f}");
    }
    // Every plot also as PNG (drawn with the font built into the binary), decoding at the SVG's
    // size, and not blank.
    for (name, w, h) in [("stages", 900, 520), ("spectrum", 900, 480)] {
        let bytes = std::fs::read(dir.join(format!("{name}.png"))).expect("png");
        let mut reader = png::Decoder::new(std::io::Cursor::new(bytes)).read_info().expect("a PNG");
        let (width, height) = (reader.info().width, reader.info().height);
        assert_eq!((width, height), (w, h), "{name}");
        let mut buf = vec![0; reader.output_buffer_size().expect("size")];
        reader.next_frame(&mut buf).expect("pixels");
        let dark = buf.chunks(4).filter(|p| p[0] < 128 && p[3] > 0).count();
        assert!(dark > 1000, "{name}: {dark} dark pixels (axes, text and data are drawn)");
    }
    let stages = std::fs::read_to_string(dir.join("stages.svg")).expect("svg");
    assert!(stages.contains("nozzle pressure ratio") && stages.contains("frequency [Hz]"));
    let spectrum = std::fs::read_to_string(dir.join("spectrum.svg")).expect("svg");
    assert!(spectrum.contains(" Hz, ") && spectrum.contains("PSD [dB re (20 uPa)^2/Hz]"));
    let _ = std::fs::remove_dir_all(&dir);
    server.stop().await;
}
