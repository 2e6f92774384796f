"""The command line (``convmon``, ``python -m monitor``): parse, call the library, print.

Nothing else lives here: each command module parses its options, calls a function of
`monitor.api` (or a job such as the demo, the fit or the poll loop) and prints the
result, as text for people or as one JSON document (``--json``). `root` holds the
top-level group, the error-to-exit-code mapping and the list of commands.
"""

import os

# Small dense matrices (fit Jacobians): a multi-threaded BLAS only contends for the two
# cores with the rest of the process; a site can still override this from the environment.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from .root import COMMANDS, cli, main

__all__ = ["COMMANDS", "cli", "main"]
