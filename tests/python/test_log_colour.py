"""Server logs written to a file or a journal (stderr not a terminal) carry no ANSI colour codes
(the escape sequences would litter log files; common practice: colour only on a terminal)."""
import subprocess

from conftest import start_server


def test_logs_to_a_pipe_have_no_colour_codes():
    proc, _ = start_server(stderr=subprocess.PIPE)
    proc.terminate()
    _, err = proc.communicate(timeout=30)
    assert "INFO" in err, err
    assert "\x1b[" not in err, repr(err[:300])
