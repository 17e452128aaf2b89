"""Exceptions that the command line turns into one sentence and exit status 2."""


class FractoInputError(ValueError):
    """Bad input from the user: an unreadable file, a bad unit, unusable data.

    The message is one complete sentence meant for the user; the command line
    prints it on stderr and exits with status 2.
    """
