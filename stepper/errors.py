"""The one exception type that carries a user-facing, one-line message."""


class InputError(Exception):
    """Bad input: the message is one line, names what is wrong and where.

    The command line prints it after ``stepper: error:`` and exits with status 2.
    """

    def __init__(self, message: str) -> None:
        one_line = " ".join(str(message).split())
        super().__init__(one_line)
        self.message = one_line


class Stopped(BaseException):
    """A signal stopped the run (SIGTERM, SIGHUP): raised by the command line's handler so that
    cleanup runs; a BaseException, like KeyboardInterrupt, so that no ``except Exception`` swallows it."""

    def __init__(self, signal_name: str, exit_status: int) -> None:
        super().__init__(signal_name)
        self.signal_name = signal_name
        self.exit_status = exit_status


class TimeLimitReached(BaseException):
    """The run passed its time limit; ``args[0]`` says where it was.  A BaseException so that it
    passes through every ``except Exception`` between the clock and the command line."""
