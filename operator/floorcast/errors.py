"""The one exception family the CLI and the operator turn into "bad input".

Everything a user can get wrong (a file, a policy, a flag) raises ``InputError`` with
a message that names where and what; the CLI maps it to exit code 2 and a single
stderr line, the operator to a condition reason. Anything else is a bug (exit 1).
"""

from __future__ import annotations


class InputError(ValueError):
    """Bad user input; the message is a complete, one-line explanation."""

    def __init__(self, message: str, *, source: str | None = None, row: int | None = None):
        self.source = source
        self.row = row
        self.problem = message
        where = ""
        if source:
            where = source
            if row is not None:
                where += f", row {row}"
            where += ": "
        super().__init__(f"{where}{message}")
