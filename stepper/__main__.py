import os
import sys

from .cli import main, quick_exit_allowed

status = main()
if quick_exit_allowed(sys.argv[1:]):
    # Every output file is closed and in place by now; tearing down the interpreter's sympy objects and caches
    # would cost about half a second more on every run.
    try:
        sys.stdout.flush()
        sys.stderr.flush()
    except BrokenPipeError:
        status = 141
    os._exit(status)
sys.exit(status)
