"""Run the ``ped2g`` command inside a test with its log lines captured by pytest.

The ped2g log handler keeps the stream it was created with; :func:`run_cli` points it at the
current ``sys.stderr`` (pytest's capture) for the call and back at the real stderr afterwards.
"""

import logging
import sys

from ped2g.cli import main


def run_cli(args: list[str]) -> int:
    """``ped2g <args>``; returns its exit status."""
    handlers = [h for h in logging.getLogger("ped2g").handlers if type(h) is logging.StreamHandler]
    for handler in handlers:
        handler.stream = sys.stderr
    try:
        return main(args)
    finally:
        for handler in handlers:
            handler.stream = sys.__stderr__
