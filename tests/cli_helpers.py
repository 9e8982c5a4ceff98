"""Helpers shared by the command-line tests of ``plan`` and ``reconstruct``."""

from __future__ import annotations

import contextlib
import io


def run_main(main, argv):
    """Run a command's ``main`` in-process; returns (exit code, stdout, stderr).

    ``SystemExit`` (argparse's way out) counts as a code.
    """
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = main([str(a) for a in argv])
        except SystemExit as stop:
            code = stop.code
    return code, out.getvalue(), err.getvalue()


def assert_user_error(code, stdout, stderr, *fragments, progress_before=False):
    """Exit code 2, one 'error:' message holding every fragment, no traceback.

    With ``progress_before``, every stderr line before the message must be a
    progress line (starting with '[').
    """
    assert code == 2, (code, stdout, stderr)
    assert "Traceback" not in stderr and "Traceback" not in stdout
    lines = stderr.splitlines()
    first = next((k for k, line in enumerate(lines) if line.startswith("error: ")), None)
    assert first is not None, stderr
    if progress_before:
        assert all(line.startswith("[") for line in lines[:first]), stderr  # progress only
    message = "\n".join(lines[first:])
    for fragment in fragments:
        assert fragment in message, (fragment, message)
