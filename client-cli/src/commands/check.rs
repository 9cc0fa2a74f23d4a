//! `jetloop check`: a regression suite. Case files (TOML) name a `jetloop` command line, the
//! values its JSON answer must hold, a tolerance for each, and the published source of each
//! value; every case runs against the server and a table says which passed and by how much.
//!
//! ```toml
//! [[case]]
//! name = "isentropic flow, M = 2"
//! args = ["isentropic", "--mach", "2"]
//! source = "NACA Report 1135 (1953), Table I"
//!
//! [[case.expect]]
//! key = "pressure_ratio"       # path into the JSON answer: a.b, a[0].b
//! value = 0.12780
//! rel_tolerance = 5e-5         # or abs_tolerance; |got - value| within it passes
//! ```
//!
//! `{dir}` in an argument stands for the folder of the case file (for recordings kept beside
//! it).

use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use clap::Args;
use serde_json::Value;
use std::path::PathBuf;

/// `jetloop check`.
#[derive(Debug, Args)]
pub struct CheckCmd {
    /// Case files (TOML), run in order.
    #[arg(required = true)]
    files: Vec<PathBuf>,
}

/// One expected value.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Expect {
    /// Path into the JSON answer (`a.b`, `a[0].b`).
    key: String,
    /// The expected value.
    value: f64,
    /// How far the answer may be from it.
    tolerance: Tolerance,
    /// The published source of the value.
    source: String,
}

#[derive(Debug, Clone, Copy, PartialEq)]
/// How far a value may be from the expected one.
pub(crate) enum Tolerance {
    /// At most this far (in the value's unit).
    Abs(f64),
    /// At most this fraction of the expected value.
    Rel(f64),
}

impl Tolerance {
    /// True when `got` is within the tolerance of `want`.
    fn allows(self, want: f64, got: f64) -> bool {
        match self {
            Tolerance::Abs(t) => (got - want).abs() <= t,
            Tolerance::Rel(t) => (got - want).abs() <= t * want.abs(),
        }
    }

    /// The tolerance as table text.
    fn text(self) -> String {
        match self {
            Tolerance::Abs(t) => format!("± {t:e}"),
            Tolerance::Rel(t) => format!("± {t:e} rel."),
        }
    }
}

/// One case: a command line and its expected values.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Case {
    /// The case file it came from.
    file: String,
    /// Its name.
    name: String,
    /// The `jetloop` command line, without the program name.
    args: Vec<String>,
    /// The values the answer must hold.
    expects: Vec<Expect>,
}

/// The cases of the case file `file` (its text `text`), with `{dir}` in arguments replaced
/// by the file's folder.
///
/// # Errors
/// [`Failure::Usage`] naming the file and case for TOML that is not a case file, a case
/// without arguments or expected values, or a value without a tolerance or source.
pub(crate) fn parse_cases(file: &str, text: &str) -> Result<Vec<Case>, Failure> {
    let dir = std::path::Path::new(file).parent().map_or(".".to_string(), |d| {
        if d.as_os_str().is_empty() {
            ".".to_string()
        } else {
            d.display().to_string()
        }
    });
    let dir = dir.as_str();
    let bad = |m: String| Failure::Usage(format!("{file}: {m}"));
    let doc: toml::Table = text.parse().map_err(|e: toml::de::Error| bad(e.to_string()))?;
    let cases =
        doc.get("case").and_then(|c| c.as_array()).ok_or_else(|| bad("no [[case]] entries".into()))?;
    let mut out = Vec::new();
    for (i, c) in cases.iter().enumerate() {
        let t = c.as_table().ok_or_else(|| bad(format!("case {i} is not a table")))?;
        let name = t.get("name").and_then(|v| v.as_str()).unwrap_or("(unnamed)").to_string();
        let here = |m: &str| bad(format!("case '{name}': {m}"));
        let args: Vec<String> = t
            .get("args")
            .and_then(|v| v.as_array())
            .ok_or_else(|| here("args (the jetloop command line, as a list) is required"))?
            .iter()
            .map(|a| a.as_str().map(|a| a.replace("{dir}", dir)).ok_or_else(|| here("args must be strings")))
            .collect::<Result<_, _>>()?;
        let case_source = t.get("source").and_then(|v| v.as_str());
        let mut expects = Vec::new();
        for e in
            t.get("expect").and_then(|v| v.as_array()).ok_or_else(|| here("no [[case.expect]] entries"))?
        {
            let e = e.as_table().ok_or_else(|| here("expect entries are tables"))?;
            let num =
                |k: &str| e.get(k).and_then(|v| v.as_float().or_else(|| v.as_integer().map(|i| i as f64)));
            let key = e.get("key").and_then(|v| v.as_str()).ok_or_else(|| here("expect.key is required"))?;
            let value =
                num("value").ok_or_else(|| here(&format!("expect '{key}': value (a number) is required")))?;
            let tolerance = match (num("abs_tolerance"), num("rel_tolerance")) {
                (Some(t), None) if t >= 0.0 => Tolerance::Abs(t),
                (None, Some(t)) if t >= 0.0 => Tolerance::Rel(t),
                _ => {
                    return Err(here(&format!(
                        "expect '{key}': give one of abs_tolerance, rel_tolerance (>= 0)"
                    )))
                }
            };
            let source = e.get("source").and_then(|v| v.as_str()).or(case_source).ok_or_else(|| {
                here(&format!("expect '{key}': name the published source of the value (source = ...)"))
            })?;
            expects.push(Expect { key: key.to_string(), value, tolerance, source: source.to_string() });
        }
        out.push(Case { file: file.to_string(), name, args, expects });
    }
    Ok(out)
}

/// The value at `path` (`a.b`, `a[2].c`) in `v`.
pub(crate) fn lookup<'a>(v: &'a Value, path: &str) -> Option<&'a Value> {
    let mut cur = v;
    for part in path.split('.') {
        let (name, indices) = match part.find('[') {
            Some(i) => (&part[..i], &part[i..]),
            None => (part, ""),
        };
        if !name.is_empty() {
            cur = cur.get(name)?;
        }
        for idx in indices.split('[').filter(|s| !s.is_empty()) {
            cur = cur.get(idx.trim_end_matches(']').parse::<usize>().ok()?)?;
        }
    }
    Some(cur)
}

/// The outcome of one expected value.
pub(crate) struct Outcome {
    /// The value found in the answer, if any.
    got: Option<f64>,
    /// True when it is within the tolerance.
    pass: bool,
    /// Why it failed, when it could not be compared.
    note: String,
}

/// Compares the expected value `e` with the `answer` (the command's JSON, or why it failed).
pub(crate) fn judge(answer: &Result<Value, String>, e: &Expect) -> Outcome {
    match answer {
        Err(m) => Outcome { got: None, pass: false, note: m.clone() },
        Ok(v) => match lookup(v, &e.key).and_then(Value::as_f64) {
            None => {
                Outcome { got: None, pass: false, note: format!("no number at '{}' in the answer", e.key) }
            }
            Some(got) => {
                let pass = e.tolerance.allows(e.value, got);
                Outcome { got: Some(got), pass, note: String::new() }
            }
        },
    }
}

impl Run for CheckCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let mut cases = Vec::new();
        for f in &self.files {
            let text = std::fs::read_to_string(f)
                .map_err(|e| Failure::Usage(format!("cannot read {}: {e}", f.display())))?;
            cases.extend(parse_cases(&f.display().to_string(), &text)?);
        }
        let mut t = Table::new("checks", "Checks")
            .col("case", "case")
            .col("key", "value")
            .col("expected", "expected")
            .col("got", "got")
            .col("deviation", "deviation")
            .col("tolerance", "tolerance")
            .col("result", "result")
            .col("source", "source");
        let (mut passed, mut failed) = (0u64, 0u64);
        let mut failures = Vec::new();
        for case in &cases {
            let answer = match crate::run_args(ctx, &case.args).await {
                Ok(r) => Ok(r.to_json()),
                Err(f) => Err(crate::failure::failure_text(&f)),
            };
            for e in &case.expects {
                let o = judge(&answer, e);
                if o.pass {
                    passed += 1;
                } else {
                    failed += 1;
                    failures.push(format!("{} ({}): {}: {}", case.name, case.file, e.key, o.note));
                }
                t.row(vec![
                    Some(Val::Text(case.name.clone())),
                    Some(Val::Text(e.key.clone())),
                    Some(Val::Num(e.value)),
                    o.got.map(Val::Num),
                    o.got.map(|g| Val::Num(g - e.value)),
                    Some(Val::Text(e.tolerance.text())),
                    Some(Val::Text(if o.pass { "pass".into() } else { "FAIL".into() })),
                    Some(Val::Text(e.source.clone())),
                ]);
            }
        }
        let mut rep = Report::new(format!(
            "{} cases, {} values: {passed} passed, {failed} failed",
            cases.len(),
            passed + failed
        ))
        .int("passed", "passed", passed, "")
        .int("failed", "failed", failed, "")
        .table(t);
        for f in &failures {
            rep = rep.text("failure", "FAILED", f.clone());
        }
        if failed > 0 {
            return Err(Failure::Checks(Box::new(rep)));
        }
        Ok(rep)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cases_parse_with_sources_and_tolerances() {
        let text = r#"
[[case]]
name = "a"
args = ["isentropic", "--mach", "2"]
source = "S"
[[case.expect]]
key = "pressure_ratio"
value = 0.1278
rel_tolerance = 5e-5
[[case.expect]]
key = "x[1].y"
value = 3
abs_tolerance = 0.5
source = "T"
"#;
        let c = parse_cases("f", text).expect("parses");
        assert_eq!(c[0].expects[0].tolerance, Tolerance::Rel(5e-5));
        assert_eq!(c[0].expects[1].source, "T");
        assert_eq!(c[0].expects[0].source, "S");
        let v: Value = serde_json::json!({"x": [{"y": 1.0}, {"y": 3.2}]});
        let o = judge(&Ok(v), &c[0].expects[1]);
        assert!(o.pass && (o.got.unwrap_or(0.0) - 3.2).abs() < 1e-12);
        // A value without a source, or without a tolerance, is refused.
        assert!(parse_cases(
            "f",
            "[[case]]\nargs=[\"info\"]\n[[case.expect]]\nkey=\"a\"\nvalue=1\nabs_tolerance=1\n"
        )
        .is_err());
        assert!(parse_cases(
            "f",
            "[[case]]\nargs=[\"info\"]\nsource=\"s\"\n[[case.expect]]\nkey=\"a\"\nvalue=1\n"
        )
        .is_err());
    }
}
