//! Every plot the CLI draws, for a fixed input, as SVG and as PNG: the SVG names its axes
//! (and its tones, where it marks tones), the PNG decodes at the SVG's size and is not blank.

use jetloop_tests::TestServer;
use std::path::Path;
use std::process::Command;

fn jetloop(server: &str, dir: &Path, args: &[&str]) {
    let o = Command::new(env!("CARGO_BIN_EXE_jetloop"))
        .arg("--server")
        .arg(server)
        .args(args)
        .current_dir(dir)
        .output()
        .expect("run jetloop");
    assert!(o.status.success(), "{args:?}: {}", String::from_utf8_lossy(&o.stderr));
}

/// The width and height attributes of the root element.
fn svg_size(svg: &str) -> (u32, u32) {
    let attr = |name: &str| -> u32 {
        let i = svg.find(&format!(" {name}=\"")).expect("attribute") + name.len() + 3;
        svg[i..].split('"').next().expect("value").parse().expect("number")
    };
    (attr("width"), attr("height"))
}

fn png_size_and_ink(path: &Path) -> ((u32, u32), usize) {
    let bytes = std::fs::read(path).expect("png file");
    let mut reader = png::Decoder::new(std::io::Cursor::new(bytes)).read_info().expect("a PNG");
    let size = (reader.info().width, reader.info().height);
    let mut buf = vec![0; reader.output_buffer_size().expect("size")];
    reader.next_frame(&mut buf).expect("pixels");
    (size, buf.chunks(4).filter(|p| p[0] < 128 && p[3] > 0).count())
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn every_plot_as_svg_and_png() {
    let server = TestServer::start().await;
    let url = server.url();
    let dir = std::env::temp_dir().join(format!("jetloop-plots-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).expect("dir");
    let sample_data = Path::new(env!("CARGO_MANIFEST_DIR")).join("../sample-data/npr-sweep-up-down.csv");
    let d = dir.clone();
    tokio::task::spawn_blocking(move || {
        jetloop(&url, &d, &["synth", "demo.wav", "--seconds", "0.5"]);
        jetloop(
            &url,
            &d,
            &["synth", "mics.csv", "--ring", "2", "--seconds", "0.5", "--sample-rate-hz", "51200"],
        );
        let sweep = sample_data.to_str().expect("path");
        // (command, plot name, labels the SVG must hold)
        let cases: Vec<(Vec<&str>, &str, Vec<&str>)> = vec![
            (
                vec!["tones", "demo.wav", "--pa-per-unit", "2000"],
                "psd",
                vec!["frequency [Hz]", "PSD [dB re (20 uPa)^2/Hz]", "5230 Hz, "],
            ),
            (
                vec!["bands", "mics.csv", "--sample-rate-hz", "51200", "--in-pascals"],
                "bands",
                vec!["band centre frequency [Hz]", "band level [dB re 20 uPa]"],
            ),
            (
                vec![
                    "sweep",
                    "--diameter-m",
                    "0.0254",
                    "--npr",
                    "3",
                    "--vary",
                    "npr",
                    "--from",
                    "2",
                    "--to",
                    "5",
                    "--count",
                    "20",
                ],
                "map",
                vec!["nozzle pressure ratio"],
            ),
            (
                vec!["cells", "--mj", "1.5", "--dj-m", "0.02"],
                "cells",
                vec!["axial distance from the nozzle exit x [m]", "shock number"],
            ),
            (
                vec!["shock-noise", "--mj", "1.5", "--dj-m", "0.02"],
                "shock-noise",
                vec!["observer angle from the downstream jet axis [deg]", "peak frequency [Hz]"],
            ),
            (vec!["modes", "--mj", "1.3", "--t0-over-ta", "1"], "modes", vec!["Strouhal number f L / Uj"]),
            (
                vec!["fit", sweep, "--control", "npr", "--diameter-m", "0.0254", "--source-cells", "4"],
                "stages",
                vec!["nozzle pressure ratio", "frequency [Hz]"],
            ),
        ];
        for (args, name, labels) in cases {
            for ext in ["svg", "png"] {
                let file = format!("{name}.{ext}");
                let mut a = args.clone();
                a.extend(["--plot", file.as_str()]);
                jetloop(&url, &d, &a);
            }
            let svg = std::fs::read_to_string(d.join(format!("{name}.svg"))).expect("svg");
            assert!(svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"), "{name}");
            for l in labels {
                assert!(svg.contains(l), "{name}: no '{l}'");
            }
            let (size, ink) = png_size_and_ink(&d.join(format!("{name}.png")));
            assert_eq!(size, svg_size(&svg), "{name}");
            assert!(ink > 1000, "{name}: {ink} dark pixels");
        }
    })
    .await
    .expect("plots");
    let _ = std::fs::remove_dir_all(&dir);
    server.stop().await;
}
