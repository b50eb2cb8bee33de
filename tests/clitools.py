"""Helpers shared by the command-line tests: ``main()`` run in-process, and the bad-input
contract (exit status 2, nothing on stdout, one line on stderr starting with ``fairpath``, no
traceback)."""

from __future__ import annotations

from fairpath.cli import main


def run(argv, capsys) -> tuple[int, str, str]:
    """Run main() in-process; argparse errors (SystemExit) become the exit status."""
    try:
        code = main([str(a) for a in argv])
    except SystemExit as exc:
        code = exc.code
    out, err = capsys.readouterr()
    return code, out, err


def assert_bad_input(code, out, err, *fragments) -> None:
    """Exit 2, nothing on stdout, one stderr line holding every fragment, no traceback."""
    assert code == 2, (code, err)
    assert out == ""
    assert "Traceback" not in err
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("fairpath"), lines[0]
    for f in fragments:
        assert str(f) in lines[0], (f, lines[0])
