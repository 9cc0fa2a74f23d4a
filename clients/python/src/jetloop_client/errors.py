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
    """Any error answer of the server: `code` (grpc.StatusCode) and `message`."""

    def __init__(self, code: grpc.StatusCode, message: str):
        super().__init__(f"{code.name}: {message}")
        self.code = code
        self.message = message


class InvalidRequest(JetloopError):
    """INVALID_ARGUMENT: `violations` lists every bad field with its value and allowed range."""

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
    """UNAVAILABLE or RESOURCE_EXHAUSTED after the retries: `retry_after_s` is the server's hint."""

    def __init__(self, code, message, retry_after_s: Optional[float]):
        super().__init__(code, message)
        self.retry_after_s = retry_after_s


def retry_delay_s(err: grpc.RpcError) -> Optional[float]:
    """The google.rpc.RetryInfo delay of an error answer, in seconds, if the server sent one."""
    status = rpc_status.from_call(err)
    if status is None:
        return None
    for d in status.details:
        if d.Is(error_details_pb2.RetryInfo.DESCRIPTOR):
            info = error_details_pb2.RetryInfo()
            d.Unpack(info)
            return info.retry_delay.seconds + info.retry_delay.nanos * 1e-9
    return None


def typed(err: grpc.RpcError) -> JetloopError:
    """The typed error for a failed call."""
    code, message = err.code(), err.details() or ""
    status = rpc_status.from_call(err)
    details = status.details if status is not None else []
    if code == grpc.StatusCode.INVALID_ARGUMENT:
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
    if code in (grpc.StatusCode.UNAVAILABLE, grpc.StatusCode.RESOURCE_EXHAUSTED):
        return ServerBusy(code, message, retry_delay_s(err))
    return JetloopError(code, message)
