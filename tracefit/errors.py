"""Errors that the command line turns into one clear line on stderr and exit code 2."""


class TracefitInputError(ValueError):
    """Bad input from the user: a malformed index, file, option or value.

    The message must say what was wrong and, where it helps, what was expected.
    The command line prints it as one line and exits with code 2.
    """
