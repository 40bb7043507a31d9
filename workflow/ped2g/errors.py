"""Errors that end a ped2g command with a one-line message instead of a traceback.

A :class:`UserError` is a mistake in the user's input (a table, a config key, an impossible
model). The CLI prints its message on one line and exits with status 2. A
:class:`ChecksFailed` is a completed run whose results miss the configured quality checks
(for example an MCMC fit that did not converge); the CLI exits with status 1.
"""

from __future__ import annotations


class UserError(Exception):
    """A problem with the user's input; exit status 2, one line, no traceback."""

    exit_status = 2

    def __init__(self, message: str):
        # Keep the message on one line whatever the caller passed.
        super().__init__(" ".join(str(message).split()))


class ChecksFailed(Exception):
    """The run finished but its results missed the configured checks; exit status 1."""

    exit_status = 1

    def __init__(self, message: str):
        super().__init__(" ".join(str(message).split()))
