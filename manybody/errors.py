"""The one exception type the command line turns into a one-sentence message and exit status 2."""


class InputError(ValueError):
    """Bad input from the user: a file, a line, a field or an argument, and what is allowed.

    ``argument`` names the Python argument the message is about (for example
    "subsystems"); the command line replaces that name by its own option
    (``--subsystems``) so that each side speaks its user's language.
    """

    def __init__(self, message: str, argument: str | None = None):
        super().__init__(message)
        self.argument = argument
