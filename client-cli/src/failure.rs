//! Why a command failed, and the exit code and message each failure gives: 0 success, 2 usage
//! error, 3 server not reachable, 4 request rejected by the server (bad input or impossible
//! physics), 5 other server error, 6 a regression check (`jetloop check`) failed.

use crate::render::report::Report;
use std::process::ExitCode;
use tonic::Code;
use tonic_types::StatusExt;

/// Why the CLI failed, mapped to an exit code.
#[derive(Debug)]
pub enum Failure {
    /// Could not reach the server.
    Connect(String),
    /// The server answered with an error status.
    Server(tonic::Status),
    /// Arguments that parse but do not make a request.
    Usage(String),
    /// Regression checks ran and some failed: the report says which.
    Checks(Box<Report>),
}

/// One line saying what went wrong (for a regression case that could not run).
pub(crate) fn failure_text(f: &Failure) -> String {
    match f {
        Failure::Connect(m) | Failure::Usage(m) => m.clone(),
        Failure::Server(s) => format!("the server answered {:?}: {}", s.code(), s.message()),
        Failure::Checks(_) => "nested checks".into(),
    }
}

impl From<tonic::Status> for Failure {
    fn from(s: tonic::Status) -> Self {
        Failure::Server(s)
    }
}

/// Prints a command's outcome (the report as a table, or JSON with `json`; the failure on
/// standard error) and gives its exit code.
pub(crate) fn finish(outcome: Result<Report, Failure>, json: bool) -> ExitCode {
    match outcome {
        Ok(report) => {
            if report.is_quiet() {
            } else if json {
                println!("{}", serde_json::to_string_pretty(&report.to_json()).unwrap_or_default());
            } else {
                print!("{}", report.to_table());
            }
            ExitCode::SUCCESS
        }
        Err(Failure::Usage(m)) => {
            eprintln!("error: {m}");
            ExitCode::from(2)
        }
        Err(Failure::Checks(report)) => {
            if json {
                println!("{}", serde_json::to_string_pretty(&report.to_json()).unwrap_or_default());
            } else {
                print!("{}", report.to_table());
            }
            ExitCode::from(6)
        }
        Err(Failure::Connect(m)) => {
            eprintln!(
                "error: {m}\nhint: start it with `cargo run --release -p jetloop-server` or pass --server"
            );
            ExitCode::from(3)
        }
        Err(Failure::Server(s)) if s.code() == Code::Cancelled && s.message().contains("Timeout expired") => {
            eprintln!("error: no answer within the --timeout given");
            ExitCode::from(5)
        }
        Err(Failure::Server(s)) => {
            let details = s.get_error_details();
            match details.bad_request() {
                Some(bad) if !bad.field_violations.is_empty() => {
                    eprintln!("error: the server rejected the request ({:?}):", s.code());
                    for v in &bad.field_violations {
                        eprintln!("  - {}", v.description);
                    }
                }
                _ => eprintln!("error: the server answered {:?}: {}", s.code(), s.message()),
            }
            match s.code() {
                Code::InvalidArgument
                | Code::FailedPrecondition
                | Code::ResourceExhausted
                | Code::OutOfRange => ExitCode::from(4),
                _ => ExitCode::from(5),
            }
        }
    }
}
