//! The generated help stays current and the completions cover every subcommand.

use std::process::Command;

fn jetloop(args: &[&str]) -> String {
    let o = Command::new(env!("CARGO_BIN_EXE_jetloop")).args(args).output().expect("run jetloop");
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    String::from_utf8(o.stdout).expect("UTF-8")
}

#[test]
fn docs_cli_md_is_the_current_help() {
    let committed =
        std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/../docs/cli.md")).expect("docs/cli.md");
    assert!(
        jetloop(&["help-markdown"]) == committed,
        "docs/cli.md is out of date: run `cargo run -q -p jetloop-cli -- help-markdown > docs/cli.md`"
    );
}

#[test]
fn completions_name_every_subcommand() {
    let bash = jetloop(&["completions", "bash"]);
    for sub in ["isentropic", "jet", "tones", "ramp", "fit", "check", "demo", "track"] {
        assert!(bash.contains(sub), "{sub}");
    }
    assert!(jetloop(&["completions", "zsh"]).contains("#compdef jetloop"));
}

#[test]
fn every_subcommand_help_shows_an_example() {
    let top = jetloop(&["--help"]);
    let subs: Vec<&str> = top
        .lines()
        .skip_while(|l| !l.starts_with("Commands:"))
        .skip(1)
        .take_while(|l| l.starts_with("  "))
        .filter_map(|l| l.split_whitespace().next())
        .filter(|s| !["help", "completions", "help-markdown"].contains(s))
        .collect();
    assert!(subs.len() >= 17, "{subs:?}");
    for s in subs {
        assert!(jetloop(&[s, "--help"]).contains("Example: jetloop"), "{s} --help has no example");
    }
}
