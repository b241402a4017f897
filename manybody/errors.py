"""The one exception type the command line turns into a one-sentence message and exit status 2."""


class InputError(ValueError):
    """Bad input from the user: a file, a line, a field, and what is allowed."""
