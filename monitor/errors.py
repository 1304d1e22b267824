"""Errors that reach the user as one sentence, never as a traceback."""


class UserError(Exception):
    """A mistake the user can fix; the message is one sentence naming what to fix.

    The CLI prints it to stderr and exits with `exit_code` (2 for bad arguments
    or files, 1 for runtime trouble such as a port that cannot be opened).
    """

    def __init__(self, message: str, exit_code: int = 2) -> None:
        super().__init__(message)
        self.exit_code = exit_code
