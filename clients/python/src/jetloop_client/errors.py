"""Typed errors built from the server's status and its google.rpc details."""
from dataclasses import dataclass
from typing import List, Optional

import grpc
from google.rpc import error_details_pb2
from grpc_status import rpc_status


@dataclass(frozen=True)
class FieldViolation:
    """One bad field: its path in the request (e.g. `conditions.nozzle.round_convergent.exit_diameter_m`)
    and the server's sentence (value and allowed range)."""

    field: str
    description: str


class JetloopError(Exception):
    """Any error answer of the server: `code` (grpc.StatusCode), `message`, and `request_id`
    (the `x-request-id` the call was sent with, which the server writes in its log lines;
    None where the error arose before a call was sent)."""

    def __init__(self, code: grpc.StatusCode, message: str):
        super().__init__(f"{code.name}: {message}")
        self.code = code
        self.message = message
        self.request_id: Optional[str] = None


class InvalidRequest(JetloopError):
    """INVALID_ARGUMENT, or RESOURCE_EXHAUSTED for a request over a server limit (too many
    samples or values; never retried): `violations` lists every bad field with its value and
    allowed range."""

    def __init__(self, code, message, violations: List[FieldViolation]):
        super().__init__(code, message)
        self.violations = violations

    def __str__(self):
        lines = [f"{v.field}: {v.description}" for v in self.violations]
        return "the server rejected the request:\n  " + "\n  ".join(lines or [self.message])


class PhysicsRefused(JetloopError):
    """FAILED_PRECONDITION: a well-formed request the physics cannot answer; `kind` is the
    machine-readable type (e.g. JET_NOT_SUPERSONIC, RECORDING_TOO_SHORT)."""

    def __init__(self, code, message, kind: Optional[str], subject: Optional[str]):
        super().__init__(code, message)
        self.kind = kind
        self.subject = subject


class ServerBusy(JetloopError):
    """The server shed the call (an answer carrying RetryInfo) on every attempt: `retry_after_s`
    is the server's hint."""

    def __init__(self, code, message, retry_after_s: Optional[float]):
        super().__init__(code, message)
        self.retry_after_s = retry_after_s


class ServerUnavailable(JetloopError):
    """No server answered at `address` (connection refused, no answer within the connect time,
    an unknown host, a failed TLS handshake, a server going away): `reason` says which. Not
    retried."""

    def __init__(self, code, message, address: str, reason: str):
        super().__init__(code, message)
        self.address = address
        self.reason = reason

    def __str__(self):
        return f"cannot reach the jetloop server at {self.address}: {self.reason}"


def _details(err: grpc.RpcError) -> list:
    """The google.rpc details of an error answer ([] when there are none or they do not parse)."""
    try:
        status = rpc_status.from_call(err)
    except (AttributeError, ValueError):
        return []
    return list(status.details) if status is not None else []


def retry_delay_s(err: grpc.RpcError) -> Optional[float]:
    """The google.rpc.RetryInfo delay of an error answer, in seconds, if the server sent one."""
    for d in _details(err):
        if d.Is(error_details_pb2.RetryInfo.DESCRIPTOR):
            info = error_details_pb2.RetryInfo()
            d.Unpack(info)
            return info.retry_delay.seconds + info.retry_delay.nanos * 1e-9
    return None


def _reason(message: str) -> str:
    """The cause in grpc's connection failure text ("... last error: UNKNOWN: ipv4:...: Failed to
    connect to remote host: Connection refused" -> "Failed to connect to remote host: Connection
    refused"), else the whole text."""
    tail = message.rsplit("last error: ", 1)[-1]
    parts = tail.split(": ")
    # Drop the status name and the peer address grpc puts before the cause.
    while len(parts) > 1 and (parts[0].isupper() or parts[0].startswith(("ipv4:", "ipv6:", "unix:", "dns:"))):
        parts = parts[1:]
    return ": ".join(parts) or message


def typed(err: grpc.RpcError, address: str = "", request_id: Optional[str] = None) -> JetloopError:
    """The typed error for a failed call to the server at `address`, sent with `request_id`."""
    e = _typed(err, address)
    e.request_id = request_id
    return e


def _typed(err: grpc.RpcError, address: str) -> JetloopError:
    code, message = err.code(), err.details() or ""
    details = _details(err)
    retry = any(d.Is(error_details_pb2.RetryInfo.DESCRIPTOR) for d in details)
    # RESOURCE_EXHAUSTED without RetryInfo is a request over a server limit (the BadRequest
    # detail names the field): sent again it would be refused again, so it is a bad request.
    if code == grpc.StatusCode.INVALID_ARGUMENT or (code == grpc.StatusCode.RESOURCE_EXHAUSTED and not retry):
        violations = []
        for d in details:
            if d.Is(error_details_pb2.BadRequest.DESCRIPTOR):
                br = error_details_pb2.BadRequest()
                d.Unpack(br)
                violations += [FieldViolation(v.field, v.description) for v in br.field_violations]
        return InvalidRequest(code, message, violations)
    if code == grpc.StatusCode.FAILED_PRECONDITION:
        for d in details:
            if d.Is(error_details_pb2.PreconditionFailure.DESCRIPTOR):
                pf = error_details_pb2.PreconditionFailure()
                d.Unpack(pf)
                if pf.violations:
                    v = pf.violations[0]
                    return PhysicsRefused(code, message, v.type, v.subject)
        return PhysicsRefused(code, message, None, None)
    delay = retry_delay_s(err)
    if delay is not None:
        return ServerBusy(code, message, delay)
    if code == grpc.StatusCode.UNAVAILABLE:
        return ServerUnavailable(code, message, address, _reason(message))
    return JetloopError(code, message)
