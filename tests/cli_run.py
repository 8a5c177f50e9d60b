"""Run the `floorcast` CLI in-process, the way a script sees it: exit code, stdout, stderr.

In-process (not a subprocess) so the many bad-input cases stay fast; one test per
command still runs the real console script.
"""

from __future__ import annotations

import pytest

from floorcast.cli.main import main


def run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as e:
        main(argv)
        raise SystemExit(0)  # main returned normally: that is exit code 0
    out = capsys.readouterr()
    return int(e.value.code or 0), out.out, out.err
