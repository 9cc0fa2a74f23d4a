"""Server logs written to a file or a journal (stderr not a terminal) carry no ANSI colour codes
(the escape sequences would litter log files; common practice: colour only on a terminal)."""
import subprocess

from conftest import _server_binary


def test_logs_to_a_pipe_have_no_colour_codes():
    proc = subprocess.Popen(
        [str(_server_binary()), "--listen", "127.0.0.1:0"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        first = proc.stdout.readline()
        assert first.startswith("jetloop-server listening on ")
    finally:
        proc.terminate()
    _, err = proc.communicate(timeout=30)
    assert "serving" in err, err
    assert "\x1b[" not in err, repr(err[:300])
