"""Python client for a jetloop server: one method per RPC, plain Python and numpy arguments
with SI units in their names, numpy arrays back, typed errors carrying the server's field
violations, and retries when the server sheds load (UNAVAILABLE with a retry delay).

    from jetloop_client import Client
    with Client("127.0.0.1:50051") as c:
        state = c.jet_state(diameter_m=0.0254, nozzle_pressure_ratio=4.0)
        print(state.fully_expanded_mach_number)
"""
from .client import Client, Calibration
from .errors import JetloopError, InvalidRequest, PhysicsRefused, ServerBusy, FieldViolation

__all__ = [
    "Client",
    "Calibration",
    "JetloopError",
    "InvalidRequest",
    "PhysicsRefused",
    "ServerBusy",
    "FieldViolation",
]
