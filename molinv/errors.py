"""The base class of every error molinv raises for its user to read.

Ground level: imports nothing from molinv, so every package can derive its errors from it. A caller (the command
line, a notebook, a pipeline) catches ``MolinvError`` once to tell a failure the user can act on (bad input, a
missing or damaged file, settings that do not fit together) from a bug.
"""


class MolinvError(Exception):
    """A failure the user can act on; the message is one line saying what and why.

    Each subclass keeps its builtin base as well (``ValueError``, ``RuntimeError``, ``OSError``), so code that
    catches those goes on working.
    """
