"""Exceptions that carry a message meant for the person running ecoscan.

Every error that comes from bad input is an :class:`InputError`. Its message is one line that
says what is wrong and how to fix it; the command-line interface prints it as ``error: ...``
and exits with code 2, without a traceback.
"""


class InputError(ValueError):
    """Bad input: a missing file, a malformed table, a CRS mix-up, an impossible parameter.

    Parameters
    ----------
    message : str
        One line, for a field ecologist: what is wrong, then what to do about it.
    """


class EcoscanWarning(UserWarning):
    """A condition worth reporting that does not stop the run (e.g. fewer than 30 points)."""
