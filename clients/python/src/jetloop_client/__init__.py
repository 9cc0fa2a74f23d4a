"""Python client for a jetloop server: one method per RPC, plain Python and numpy arguments
with SI units in their names, numpy arrays back, typed errors carrying the server's field
violations, and retries when the server sheds load (an answer carrying a retry delay).

    from jetloop_client import Client
    with Client("127.0.0.1:50051") as c:
        state = c.jet_state(diameter_m=0.0254, nozzle_pressure_ratio=4.0)
        print(state.fully_expanded_mach_number)

Recordings: `read_wav`, `read_tdms`, `read_hdf5`, `read_mat` give a `Recording` the analyses
take directly (these need `pip install "jetloop-client[files]"`); one calibration per channel
with `ChannelCalibration` or `load_calibration_file` (the CLI's TOML format).
"""
from .calibration import Calibration, ChannelCalibration, load_calibration_file
from .client import Client
from .errors import (FieldViolation, InvalidRequest, JetloopError, PhysicsRefused, ServerBusy,
                     ServerUnavailable)
from .readers import read_hdf5, read_mat, read_tdms, read_wav
from .recording import Recording

__all__ = [
    "Client",
    "Calibration",
    "ChannelCalibration",
    "load_calibration_file",
    "Recording",
    "read_wav",
    "read_tdms",
    "read_hdf5",
    "read_mat",
    "JetloopError",
    "InvalidRequest",
    "PhysicsRefused",
    "ServerBusy",
    "ServerUnavailable",
    "FieldViolation",
]
