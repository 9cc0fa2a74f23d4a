"""Server logs written to a file or a journal (stderr not a terminal) carry no ANSI colour codes
(the escape sequences would litter log files; common practice: colour only on a terminal)."""
import subprocess
import time

import grpc

from conftest import start_server


def test_logs_to_a_pipe_have_no_colour_codes():
    proc, address = start_server(stderr=subprocess.PIPE)
    try:
        # Serving (and its shutdown handler in place) before it is asked to stop.
        with grpc.insecure_channel(address) as ch:
            grpc.channel_ready_future(ch).result(timeout=10)
        time.sleep(0.2)
    finally:
        proc.terminate()
    _, err = proc.communicate(timeout=30)
    assert "INFO" in err, err
    assert "\x1b[" not in err, repr(err[:300])
