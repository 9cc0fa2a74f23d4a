//! Streaming a recording from disk through the `jetloop` CLI against sending the same bytes
//! from memory, both as ExtractTonesStream blocks to a local `jetloop-server`.
//!
//! The bench writes a raw little-endian recording (a 3 kHz sine at 51.2 kHz, mono) to a temp
//! file a MiB at a time (deleted at the end), starts `jetloop-server` on 127.0.0.1:0, then:
//! - disk path: runs `jetloop tones FILE --input-kind raw ... --block-bytes B`, the CLI's own
//!   code path (header, ServerInfo, blocks read from disk by a reader thread), polling the
//!   child's `/proc/PID/status` VmHWM every 5 ms for its peak resident memory;
//! - memory path: reads the whole file into this process, then sends it in blocks of the
//!   same size from memory; its peak is this process's own VmHWM (`/proc/self/status`).
//!
//! Prints the throughput of each (file MiB per wall-clock second; the memory path's time does
//! not include reading the file), the ratio disk/memory, and both peaks. Each path runs
//! five times, alternating, and the fastest run counts (the machine may be shared).
//!
//! Usage: `bench-read-stream [SIZE_MIB] [i16|f32|f64] [BLOCK_BYTES]` (default 1024 i16
//! 1048576); the `jetloop` and `jetloop-server` binaries are taken from this binary's folder
//! (build them with `cargo build --release -p jetloop-cli -p jetloop-server`). A server that
//! still caps one stream at 2^25 samples refuses files over that (256 MiB of f64, 64 MiB of
//! i16) with RESOURCE_EXHAUSTED, and the bench says so.
#![forbid(unsafe_code)]

use jetloop_proto::pb::{self, spectrum_service_client::SpectrumServiceClient};
use std::io::{BufRead, Write};
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// Sample rate of the synthetic recording in Hz.
const RATE_HZ: f64 = 51_200.0;
/// Runs of each path, alternating; the fastest counts (the machine is shared).
const ROUNDS: usize = 5;
/// Tone frequency in Hz.
const TONE_HZ: f64 = 3_000.0;

/// Deletes the temp file however the bench ends.
struct TempFile(PathBuf);
impl Drop for TempFile {
    fn drop(&mut self) {
        let _ = std::fs::remove_file(&self.0);
    }
}

/// Stops the server however the bench ends.
struct Server(std::process::Child);
impl Drop for Server {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

/// The shortest of `v`.
fn best(v: &[f64]) -> f64 {
    v.iter().copied().fold(f64::INFINITY, f64::min)
}

/// The middle of `v` (the upper middle for an even count).
fn median(v: &[f64]) -> f64 {
    let mut s = v.to_vec();
    s.sort_by(f64::total_cmp);
    s.get(s.len() / 2).copied().unwrap_or(f64::NAN)
}

/// Peak resident memory (VmHWM) in KiB from a `/proc/.../status` file.
fn vm_hwm_kib(status: &str) -> Option<u64> {
    std::fs::read_to_string(status)
        .ok()?
        .lines()
        .find(|l| l.starts_with("VmHWM:"))?
        .split_whitespace()
        .nth(1)?
        .parse()
        .ok()
}

/// Writes `bytes` bytes of the sine in `format` (bytes per sample `width`) to `path`.
fn synthesise(path: &Path, bytes: u64, format: &str) -> std::io::Result<()> {
    let mut f = std::io::BufWriter::with_capacity(1 << 20, std::fs::File::create(path)?);
    let width = if format == "i16" {
        2
    } else if format == "f32" {
        4
    } else {
        8
    };
    let step = 2.0 * std::f64::consts::PI * TONE_HZ / RATE_HZ;
    let mut block = Vec::with_capacity(1 << 20);
    for k in 0..bytes / width {
        let v = 0.5 * (step * (k % 51_200) as f64).sin();
        match format {
            "i16" => block.extend_from_slice(&((v * 32767.0) as i16).to_le_bytes()),
            "f32" => block.extend_from_slice(&(v as f32).to_le_bytes()),
            _ => block.extend_from_slice(&v.to_le_bytes()),
        }
        if block.len() >= 1 << 20 {
            f.write_all(&block)?;
            block.clear();
        }
    }
    f.write_all(&block)?;
    f.flush()
}

/// The strongest tone's frequency in Hz in a `jetloop --json tones` answer.
fn strongest_hz(json: &serde_json::Value) -> Option<f64> {
    let tones = json["channels"][0]["tones"].as_array()?;
    let best = tones.iter().max_by(|a, b| {
        a["level_db"].as_f64().partial_cmp(&b["level_db"].as_f64()).unwrap_or(std::cmp::Ordering::Equal)
    })?;
    best["frequency_hz"].as_f64()
}

/// One disk-path run: (seconds, child's peak KiB, strongest tone in Hz).
fn disk_run(
    cli: &Path,
    addr: &str,
    file: &Path,
    format: &str,
    block: usize,
) -> Result<(f64, u64, f64), String> {
    let t = Instant::now();
    let mut child = Command::new(cli)
        .args(["--server", &format!("http://{addr}"), "--json", "tones"])
        .arg(file)
        .args([
            "--input-kind",
            "raw",
            "--raw-format",
            format,
            "--sample-rate-hz",
            "51200",
            "--pa-per-unit",
            "1",
        ])
        .args(["--block-bytes", &block.to_string()])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .map_err(|e| format!("cannot run {}: {e}", cli.display()))?;
    let status = format!("/proc/{}/status", child.id());
    let mut peak = 0;
    while child.try_wait().map_err(|e| e.to_string())?.is_none() {
        peak = peak.max(vm_hwm_kib(&status).unwrap_or(0));
        std::thread::sleep(Duration::from_millis(5));
    }
    let secs = t.elapsed().as_secs_f64();
    let out = child.wait_with_output().map_err(|e| e.to_string())?;
    if !out.status.success() {
        return Err(format!("jetloop tones failed: {}", String::from_utf8_lossy(&out.stderr)));
    }
    let json: serde_json::Value = serde_json::from_slice(&out.stdout).map_err(|e| e.to_string())?;
    Ok((secs, peak, strongest_hz(&json).ok_or("no tone in the answer")?))
}

/// One memory-path run: (seconds, strongest tone in Hz).
async fn memory_run(
    addr: &str,
    data: &bytes::Bytes,
    format: &str,
    block: usize,
) -> Result<(f64, f64), String> {
    let (wire, width) = match format {
        "i16" => (pb::SampleFormat::I16Le, 2),
        "f32" => (pb::SampleFormat::F32Le, 4),
        _ => (pb::SampleFormat::F64Le, 8),
    };
    // The CLI's connection settings for this kind of call (its default channel).
    let ch = tonic::transport::Endpoint::from_shared(format!("http://{addr}"))
        .map_err(|e| e.to_string())?
        .connect()
        .await
        .map_err(|e| e.to_string())?;
    let mut c = SpectrumServiceClient::new(ch).max_encoding_message_size(256 << 20);
    let t = Instant::now();
    let question = pb::ExtractTonesRequest {
        samples: Some(pb::Samples {
            sample_rate_hz: RATE_HZ,
            channel_count: 1,
            layout: pb::ChannelLayout::Interleaved as i32,
            data: Some(pb::samples::Data::Raw(pb::RawSamples {
                data: bytes::Bytes::new(),
                format: wire as i32,
            })),
            calibration: Some(pb::Calibration { scale: Some(pb::calibration::Scale::PascalsPerUnit(1.0)) }),
            ..Default::default()
        }),
        welch: Some(pb::WelchOptions::default()),
        tones: Some(pb::ToneOptions::default()),
        psd_output: Some(pb::PsdOutputOptions { include: false, max_points: None }),
        ..Default::default()
    };
    let step = (block / width).max(1) * width;
    let first = pb::SampleBlock {
        request: Some(question),
        expected_frames: Some((data.len() / width) as u64),
        ..Default::default()
    };
    let data = data.clone();
    let rest = (0..data.len()).step_by(step).map(move |a| pb::SampleBlock {
        frames: data.slice(a..(a + step).min(data.len())),
        ..Default::default()
    });
    let r = c
        .extract_tones_stream(tokio_stream::iter(std::iter::once(first).chain(rest)))
        .await
        .map_err(|e| format!("{:?}: {}", e.code(), e.message()))?
        .into_inner();
    let secs = t.elapsed().as_secs_f64();
    let best = r.channels.first().and_then(|c| {
        c.tones.iter().max_by(|a, b| a.level_db.partial_cmp(&b.level_db).unwrap_or(std::cmp::Ordering::Equal))
    });
    Ok((secs, best.map(|t| t.frequency_hz).ok_or("no tone in the answer")?))
}

#[tokio::main(flavor = "current_thread")]
async fn main() -> std::process::ExitCode {
    let args: Vec<String> = std::env::args().collect();
    let size_mib: u64 = args.get(1).and_then(|s| s.parse().ok()).unwrap_or(1024);
    let format = args.get(2).cloned().unwrap_or_else(|| "i16".into());
    let block: usize = args.get(3).and_then(|s| s.parse().ok()).unwrap_or(1 << 20);
    if !["i16", "f32", "f64"].contains(&format.as_str()) {
        eprintln!("usage: bench-read-stream [SIZE_MIB] [i16|f32|f64] [BLOCK_BYTES]");
        return std::process::ExitCode::from(2);
    }
    let dir =
        std::env::current_exe().ok().and_then(|p| p.parent().map(Path::to_path_buf)).unwrap_or_default();
    let (cli, server_bin) = (dir.join("jetloop"), dir.join("jetloop-server"));
    for b in [&cli, &server_bin] {
        if !b.exists() {
            eprintln!("{} not found: cargo build --release -p jetloop-cli -p jetloop-server", b.display());
            return std::process::ExitCode::from(2);
        }
    }
    let file = TempFile(
        std::env::temp_dir().join(format!("jetloop-bench-read-stream-{}.{format}", std::process::id())),
    );
    let bytes = size_mib << 20;
    let t = Instant::now();
    synthesise(&file.0, bytes, &format).expect("write the temp recording");
    println!(
        "wrote {size_mib} MiB of {format} samples to {} in {:.1} s",
        file.0.display(),
        t.elapsed().as_secs_f64()
    );
    let mut child = Command::new(&server_bin)
        .args(["--listen", "127.0.0.1:0"])
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .expect("start jetloop-server");
    let mut line = String::new();
    let stdout = child.stdout.take().expect("server stdout");
    let server = Server(child);
    std::io::BufReader::new(stdout).read_line(&mut line).expect("server address line");
    let addr = line.trim().rsplit(' ').next().unwrap_or_default().to_string();
    let mib = bytes as f64 / f64::from(1u32 << 20);
    let (mut disks, mut mems) = (Vec::new(), Vec::new());
    let mut disk_peak = 0;
    let mut data = bytes::Bytes::new();
    for round in 0..ROUNDS {
        match disk_run(&cli, &addr, &file.0, &format, block) {
            Ok((s, peak, hz)) => {
                println!(
                    "disk   run {round}: {s:.3} s, {:.0} MiB/s, CLI peak RSS {:.1} MiB, tone {hz:.2} Hz",
                    mib / s,
                    peak as f64 / 1024.0
                );
                disks.push(s);
                disk_peak = disk_peak.max(peak);
            }
            Err(e) => {
                eprintln!("disk path failed: {e}");
                return std::process::ExitCode::FAILURE;
            }
        }
        if data.is_empty() {
            data = std::fs::read(&file.0).expect("read the temp recording").into();
        }
        match memory_run(&addr, &data, &format, block).await {
            Ok((s, hz)) => {
                println!("memory run {round}: {s:.3} s, {:.0} MiB/s, tone {hz:.2} Hz", mib / s);
                mems.push(s);
            }
            Err(e) => {
                eprintln!("memory path failed: {e}");
                return std::process::ExitCode::FAILURE;
            }
        }
    }
    let own_peak = vm_hwm_kib("/proc/self/status").unwrap_or(0);
    let (disk, mem) = (best(&disks), best(&mems));
    println!("file {mib:.0} MiB {format}, blocks of {block} bytes, best of {ROUNDS} each:");
    println!(
        "  disk path (jetloop tones, read from disk):   {:.0} MiB/s, peak RSS {:.1} MiB",
        mib / disk,
        disk_peak as f64 / 1024.0
    );
    println!(
        "  memory path (same bytes held in memory):      {:.0} MiB/s, peak RSS {:.1} MiB",
        mib / mem,
        own_peak as f64 / 1024.0
    );
    println!(
        "  disk / memory throughput: {:.2} best of each, {:.2} median of each (target >= 0.80)",
        mem / disk,
        median(&mems) / median(&disks)
    );
    drop(server);
    std::process::ExitCode::SUCCESS
}
