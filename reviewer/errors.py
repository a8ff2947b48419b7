"""Errors that reach the user as one line and exit code 2."""


class BadInput(Exception):
    """Input the program cannot use: the message is one line that names the file and the problem."""

    def __init__(self, message: str) -> None:
        super().__init__(" ".join(str(message).split()))
