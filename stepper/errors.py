"""The one exception type that carries a user-facing, one-line message."""


class InputError(Exception):
    """Bad input: the message is one line, names what is wrong and where.

    The command line prints it after ``stepper: error:`` and exits with status 2.
    """

    def __init__(self, message: str) -> None:
        one_line = " ".join(str(message).split())
        super().__init__(one_line)
        self.message = one_line
