//! Errors of the API layer and their one mapping to `tonic::Status`.

use crate::physics::RangeError;
use tonic::{Code, Status};
use tonic_types::{ErrorDetails, StatusExt};

/// One bad field: its path in the request and a sentence saying what is allowed.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FieldViolation {
    /// Path of the field in the request, e.g. `conditions.gas.gamma`.
    pub field: String,
    /// What is wrong, with the value given and the allowed range.
    pub description: String,
}

/// Why a well-formed request cannot be answered, as a `google.rpc.PreconditionFailure`
/// violation: a type a program can match on, the request part it concerns, and a sentence.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PreconditionViolation {
    /// Machine-readable kind, e.g. `JET_NOT_SUPERSONIC`.
    pub kind: &'static str,
    /// The request part concerned, e.g. `jet.conditions`.
    pub subject: String,
    /// What the physics says, in a sentence.
    pub description: String,
}

impl PreconditionViolation {
    /// A violation of `kind` about `subject`.
    pub fn new(kind: &'static str, subject: impl Into<String>, description: impl Into<String>) -> Self {
        Self { kind, subject: subject.into(), description: description.into() }
    }
}

/// Kind of the precondition failure for a jet without vortex-sheet shock cells.
pub const JET_NOT_SUPERSONIC: &str = "JET_NOT_SUPERSONIC";

impl ApiError {
    /// `FAILED_PRECONDITION` for a jet (at request path `subject`) that has no shock cells.
    pub fn not_supersonic(subject: &str, e: &crate::physics::jet::NotSupersonic) -> Self {
        ApiError::Precondition(PreconditionViolation::new(JET_NOT_SUPERSONIC, subject, e.to_string()))
    }
}

/// Everything a request can fail with.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ApiError {
    /// Malformed or out-of-range input: `INVALID_ARGUMENT` with field violations.
    #[error("invalid request: {0:?}")]
    Invalid(Vec<FieldViolation>),
    /// Input larger than a server limit: `RESOURCE_EXHAUSTED`.
    #[error("{field}: {actual} exceeds the limit {limit}")]
    TooLarge {
        /// Field path.
        field: String,
        /// The limit, with its unit.
        limit: String,
        /// What was sent.
        actual: String,
    },
    /// Well-formed but physically impossible: `FAILED_PRECONDITION` with a
    /// `google.rpc.PreconditionFailure` detail.
    #[error("{}", .0.description)]
    Precondition(PreconditionViolation),
    /// The computation was stopped (deadline passed, caller gone): `CANCELLED`. The caller
    /// normally never sees it: the deadline layer has already answered DEADLINE_EXCEEDED.
    #[error("{0}")]
    Stopped(#[from] crate::cancel::Stopped),
}

impl ApiError {
    /// The same error with every field path placed under `prefix` (a message nested in
    /// another).
    pub fn within(self, prefix: &str) -> Self {
        match self {
            ApiError::Invalid(v) => ApiError::Invalid(
                v.into_iter()
                    .map(|f| FieldViolation { field: join(prefix, &f.field), description: f.description })
                    .collect(),
            ),
            ApiError::TooLarge { field, limit, actual } => {
                ApiError::TooLarge { field: join(prefix, &field), limit, actual }
            }
            e @ (ApiError::Precondition(_) | ApiError::Stopped(_)) => e,
        }
    }
}

impl From<ApiError> for Status {
    fn from(e: ApiError) -> Self {
        match e {
            ApiError::Invalid(violations) => {
                let mut details = ErrorDetails::new();
                for v in &violations {
                    details.add_bad_request_violation(v.field.clone(), v.description.clone());
                }
                let summary =
                    violations.iter().map(|v| v.description.as_str()).collect::<Vec<_>>().join("; ");
                Status::with_error_details(Code::InvalidArgument, summary, details)
            }
            ApiError::TooLarge { field, limit, actual } => {
                let msg = format!("{field}: {actual} exceeds the server limit of {limit}");
                let mut details = ErrorDetails::new();
                details.add_bad_request_violation(field, msg.clone());
                Status::with_error_details(Code::ResourceExhausted, msg, details)
            }
            ApiError::Stopped(e) => Status::cancelled(e.to_string()),
            ApiError::Precondition(PreconditionViolation { kind, subject, description }) => {
                let mut details = ErrorDetails::new();
                details.add_precondition_failure_violation(kind, subject, description.clone());
                Status::with_error_details(Code::FailedPrecondition, description, details)
            }
        }
    }
}

/// Collects field violations while a request is converted, so the caller hears about every
/// bad field at once.
#[derive(Debug, Default)]
pub struct Check {
    violations: Vec<FieldViolation>,
}

fn join(prefix: &str, leaf: &str) -> String {
    if prefix.is_empty() {
        leaf.to_string()
    } else if leaf.is_empty() {
        prefix.to_string()
    } else {
        format!("{prefix}.{leaf}")
    }
}

impl Check {
    /// A collector with no violations.
    pub fn new() -> Self {
        Self::default()
    }

    /// Records a domain range error under `prefix` (the path of the message that holds the
    /// field); returns the value when there was no error.
    pub fn range<T>(&mut self, prefix: &str, r: Result<T, RangeError>) -> Option<T> {
        match r {
            Ok(v) => Some(v),
            Err(e) => {
                let field = join(prefix, e.quantity);
                let value = if e.value.is_finite() {
                    format!("{}", e.value)
                } else {
                    format!("{} (not a finite number)", e.value)
                };
                self.violations.push(FieldViolation {
                    description: format!("{field} = {value} is outside the allowed range {}", e.allowed),
                    field,
                });
                None
            }
        }
    }

    /// Records a required field that was not set.
    pub fn missing(&mut self, field: impl Into<String>, what: &str) {
        let field = field.into();
        self.violations.push(FieldViolation { description: format!("{field} is required: {what}"), field });
    }

    /// Records any other violation with its own sentence.
    pub fn other(&mut self, field: impl Into<String>, description: impl Into<String>) {
        self.violations.push(FieldViolation { field: field.into(), description: description.into() });
    }

    /// Number of violations recorded so far.
    pub fn count(&self) -> usize {
        self.violations.len()
    }

    /// True when nothing was recorded.
    pub fn is_clean(&self) -> bool {
        self.violations.is_empty()
    }

    /// Ends the check: the value when there were no violations.
    ///
    /// # Errors
    /// [`ApiError::Invalid`] with every violation recorded.
    pub fn finish<T>(self, value: Option<T>) -> Result<T, ApiError> {
        match value {
            Some(v) if self.violations.is_empty() => Ok(v),
            _ if !self.violations.is_empty() => Err(ApiError::Invalid(self.violations)),
            _ => Err(ApiError::Invalid(vec![FieldViolation {
                field: String::new(),
                description: "the request could not be converted".into(),
            }])),
        }
    }
}

/// Messages tonic gives request bodies it cannot decode (tonic 0.14 `codec/decode.rs`,
/// tonic-prost `from_decode_error`).
const DECODE_FAILURES: [&str; 5] = [
    "failed to decode Protobuf message",
    "protocol error: received message with",
    "Error decompressing",
    "Unexpected EOF decoding stream",
    "Missing request message",
];
/// tonic's message for a request over the size limit.
const TOO_LARGE: &str = "Error, decoded message length too large";

/// The status a trailers-only error answer should carry instead, if any.
pub fn inbound_status(status: &Status) -> Option<Status> {
    let msg = status.message();
    match status.code() {
        tonic::Code::Internal if DECODE_FAILURES.iter().any(|p| msg.starts_with(p)) => {
            let mut details = ErrorDetails::new();
            details.add_bad_request_violation(
                "(request body)",
                format!("the request body is not a valid message of this RPC: {msg}"),
            );
            Some(Status::with_error_details(
                tonic::Code::InvalidArgument,
                format!("the request body could not be decoded: {msg}"),
                details,
            ))
        }
        tonic::Code::OutOfRange if msg.starts_with(TOO_LARGE) => {
            let mut details = ErrorDetails::new();
            details.add_bad_request_violation("(request body)", msg.to_string());
            Some(Status::with_error_details(
                tonic::Code::ResourceExhausted,
                format!("{msg}; send smaller messages (samples in blocks: ExtractTonesStream, CrossSpectraStream)"),
                details,
            ))
        }
        _ => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn invalid_argument_carries_bad_request_details() {
        let mut c = Check::new();
        let r: Result<f64, _> = Err(RangeError::new("gamma", f64::NAN, "(1, 5]"));
        assert!(c.range("conditions.gas", r).is_none());
        let status: Status = c.finish::<()>(None).unwrap_err().into();
        assert_eq!(status.code(), Code::InvalidArgument);
        let details = status.get_error_details();
        let bad = details.bad_request().expect("bad request details");
        assert_eq!(bad.field_violations[0].field, "conditions.gas.gamma");
        assert!(bad.field_violations[0].description.contains("not a finite number"));
        assert!(bad.field_violations[0].description.contains("(1, 5]"));
    }

    #[test]
    fn failed_precondition_carries_a_precondition_failure() {
        let e = ApiError::Precondition(PreconditionViolation::new("X_KIND", "jet.conditions", "why"));
        let status: Status = e.into();
        assert_eq!(status.code(), Code::FailedPrecondition);
        assert_eq!(status.message(), "why");
        let details = status.get_error_details();
        let v = &details.precondition_failure().expect("precondition failure").violations[0];
        assert_eq!(
            (v.r#type.as_str(), v.subject.as_str(), v.description.as_str()),
            ("X_KIND", "jet.conditions", "why")
        );
    }
}
