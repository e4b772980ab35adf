import os
import sys

from .cli import main, quick_exit_allowed

status = main()
if quick_exit_allowed(sys.argv[1:]):
    # Every output file is closed and in place by now; tearing down the interpreter's sympy objects and caches
    # would cost about half a second more on every run.
    for stream in (sys.stdout, sys.stderr):
        try:
            if stream is not None:
                stream.flush()
        except BrokenPipeError:
            status = status or 141
        except OSError:
            status = status or 1
    os._exit(status)
sys.exit(status)
