"""Helpers for tests that call the command line in-process."""

from pipeline.cli import main


def run_cli(capsys, *argv):
    """Run ``cubewright ARGV`` in-process; return (exit code, stdout, stderr)."""
    code = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def one_error_line(err):
    """Return the single ``cubewright: error:`` line of stderr, checking there is no traceback."""
    errors = [line for line in err.splitlines() if line.startswith("cubewright: error:")]
    assert len(errors) == 1, err
    assert "Traceback" not in err
    return errors[0]
