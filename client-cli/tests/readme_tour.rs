//! Every shell command of README.md, taken from the README itself so the two cannot drift:
//! the tour's `cargo run -q -p jetloop-cli -- ...` commands run in order, in a fresh folder
//! holding a copy of `sample-data/`, against a real server, and each must succeed. Any other
//! command must be one of the set-up commands this test knows (server start, install, tests),
//! so a new kind of command cannot slip past untested.

use jetloop_tests::TestServer;
use std::path::{Path, PathBuf};
use std::process::Command;

/// The prefix the README runs the client with.
const CLIENT: &str = "cargo run -q -p jetloop-cli -- ";

/// Set-up commands the README shows that this test does not run: it starts its own server and
/// is itself run by the test command; the Python set-up lines are run, with the README's Python
/// snippets, by tests/python/test_readme_python.py.
const SET_UP: [&str; 8] = [
    "cargo run --release -p jetloop-server",
    "cargo install --path client-cli",
    "cargo test --workspace",
    "cargo run --release -p jetloop-bench --bin ",
    "python3 -m pip install ",
    "mkdir -p build/python",
    "python3 -m grpc_tools.protoc ",
    "export PYTHONPATH=",
];

/// Commands of the README's ```sh blocks: continuation lines joined, comments dropped.
fn readme_commands(text: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut in_sh = false;
    let mut pending = String::new();
    for line in text.lines() {
        let t = line.trim();
        if t.starts_with("```") {
            in_sh = t == "```sh";
            continue;
        }
        if !in_sh {
            continue;
        }
        let code = t.split(" #").next().unwrap_or("").trim();
        if code.starts_with('#') || code.is_empty() {
            continue;
        }
        if let Some(head) = code.strip_suffix('\\') {
            pending.push_str(head.trim_end());
            pending.push(' ');
        } else {
            pending.push_str(code);
            out.push(std::mem::take(&mut pending));
        }
    }
    out
}

fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).expect("create folder");
    for e in std::fs::read_dir(from).expect("read sample data") {
        let e = e.expect("entry");
        if e.file_type().expect("type").is_file() {
            std::fs::copy(e.path(), to.join(e.file_name())).expect("copy example");
        }
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn every_readme_command_runs_in_order_on_a_fresh_folder() {
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("..");
    let text = std::fs::read_to_string(root.join("README.md")).expect("README.md");
    let commands = readme_commands(&text);
    let (tour, other): (Vec<_>, Vec<_>) = commands.into_iter().partition(|c| c.starts_with(CLIENT));
    for c in &other {
        assert!(SET_UP.iter().any(|s| c.starts_with(s)), "README command not covered by this test: {c}");
    }
    assert!(tour.len() >= 20, "the tour has {} client commands: is the README parsed?", tour.len());

    let server = TestServer::start().await;
    let url = server.url();
    let dir = std::env::temp_dir().join(format!("jetloop-readme-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    copy_dir(&root.join("sample-data"), &dir.join("sample-data"));
    copy_dir(&root.join("tests/data"), &dir.join("tests/data"));
    let failures = tokio::task::spawn_blocking(move || {
        let bin = env!("CARGO_BIN_EXE_jetloop");
        let mut failures = Vec::new();
        for c in &tour {
            let line = format!("'{bin}' {}", &c[CLIENT.len()..]);
            let out = Command::new("sh")
                .arg("-c")
                .arg(&line)
                .current_dir(&dir)
                .env("JETLOOP_SERVER", &url)
                .output()
                .expect("run sh");
            if !out.status.success() {
                failures.push(format!(
                    "{c}\n  exit {:?}\n  {}",
                    out.status.code(),
                    String::from_utf8_lossy(&out.stderr).trim()
                ));
            }
        }
        let _ = std::fs::remove_dir_all(&dir);
        failures
    })
    .await
    .expect("tour");
    server.stop().await;
    assert!(failures.is_empty(), "README commands that failed:\n{}", failures.join("\n"));
}

#[test]
fn continuation_lines_are_joined_and_comments_dropped() {
    let text = "x\n```sh\n# c\ncargo run -q -p jetloop-cli -- a \\\n    --b 1  # note\ncargo test --workspace\n```\n```python\nnot_sh\n```\n";
    assert_eq!(
        readme_commands(text),
        vec!["cargo run -q -p jetloop-cli -- a --b 1", "cargo test --workspace"]
    );
}
