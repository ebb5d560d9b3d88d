"""Exit status of ``ndtmap`` (re-exported by :mod:`ndtmap.cli`)."""

__all__ = ["EXIT_OK", "EXIT_PROBLEMS", "EXIT_USAGE", "EXIT_INTERNAL", "EXIT_INTERRUPTED"]

#: The command did what was asked.
EXIT_OK = 0
#: The command ran but found problems (``info`` on an invalid grid) or finished a batch partially.
EXIT_PROBLEMS = 1
#: A usage or input error: a bad option, a bad or missing file (one line on stderr).
EXIT_USAGE = 2
#: An internal error, i.e. a bug (BSD ``sysexits.h`` EX_SOFTWARE).
EXIT_INTERNAL = 70
#: Interrupted with Ctrl-C (128 + SIGINT, the shell convention).
EXIT_INTERRUPTED = 130
