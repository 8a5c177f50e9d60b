"""The ``floorcast`` command: one entry point, exit codes that scripts can rely on.

Exit codes (docs/cli.md): 0 ok, 2 bad input with a one-line reason on stderr, 1 an
internal error. Every command raises ``InputError`` for anything the user can fix;
this module is the only place that turns exceptions into exit codes, so no command
can forget the contract.
"""

from __future__ import annotations

import os
import sys

import click

from floorcast import __version__
from floorcast.cli.backtest import backtest
from floorcast.cli.demo import demo
from floorcast.cli.forecast import forecast
from floorcast.cli.plan import plan
from floorcast.cli.run import run
from floorcast.cli.status import status
from floorcast.errors import InputError


@click.group(
    name="floorcast",
    context_settings={"help_option_names": ["-h", "--help"]},
    help="Replica floors for Kubernetes HPAs, raised ahead of forecast peaks.",
)
@click.version_option(__version__, prog_name="floorcast")
def app() -> None:
    pass


app.add_command(forecast)
app.add_command(plan)
app.add_command(demo)
app.add_command(run)
app.add_command(backtest)
app.add_command(status)


def fail(message: str, code: int) -> None:
    """One line on stderr, nothing on stdout: ``--json`` consumers see no partial output."""
    line = " ".join(str(message).split())
    print(f"floorcast: error: {line}", file=sys.stderr)
    sys.exit(code)


def main(argv: list[str] | None = None) -> None:
    try:
        app.main(args=argv, standalone_mode=False, prog_name="floorcast")
    except click.exceptions.Exit as e:
        sys.exit(e.exit_code)
    except click.exceptions.Abort:
        fail("aborted", 1)
    except click.UsageError as e:
        fail(e.format_message(), 2)
    except InputError as e:
        fail(str(e), 2)
    except BrokenPipeError:
        sys.exit(0)
    except Exception as e:  # the last line of defence: exit 1, not a traceback wall
        if os.environ.get("FLOORCAST_DEBUG"):
            raise
        fail(f"internal error: {type(e).__name__}: {e}", 1)


if __name__ == "__main__":
    main()
