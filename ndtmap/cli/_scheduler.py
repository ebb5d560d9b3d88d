"""The ``--scheduler ADDRESS`` option shared by the commands that compute on a grid.

The option only names a Dask distributed scheduler; :func:`ndtmap.cluster.use_scheduler`
connects to it for the duration of the command.
"""

from __future__ import annotations

import argparse
import functools
from collections.abc import Callable

from ndtmap.cluster import use_scheduler

__all__ = ["add_scheduler_argument", "with_scheduler"]


def add_scheduler_argument(parser: argparse.ArgumentParser) -> None:
    """Add the common ``--scheduler ADDRESS`` option to a sub-command's parser.

    Examples
    --------
    >>> p = argparse.ArgumentParser()
    >>> add_scheduler_argument(p)
    >>> p.parse_args(["--scheduler", "tcp://127.0.0.1:8786"]).scheduler
    'tcp://127.0.0.1:8786'
    """
    parser.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="compute on the Dask distributed scheduler at ADDRESS (tcp://host:port); the grid is then opened "
        "lazily and its file must be readable by the workers under the same path",
    )


def with_scheduler(command: Callable[[argparse.Namespace], int]) -> Callable[[argparse.Namespace], int]:
    """Wrap a command-line function so that it runs inside ``use_scheduler(args.scheduler)``.

    Examples
    --------
    >>> run = with_scheduler(lambda args: 0)
    >>> run(argparse.Namespace(scheduler=None))   # no address: dask's local threads
    0
    """

    @functools.wraps(command)
    def run(args: argparse.Namespace) -> int:
        with use_scheduler(getattr(args, "scheduler", None)):
            return command(args)

    return run
