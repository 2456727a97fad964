"""Exception and warning types raised by perierr."""

__all__ = ["InputError", "PerierrWarning"]


class InputError(ValueError):
    """Bad user input: names the field (and row), the value and what was expected.

    Parameters
    ----------
    field : str
        The input field at fault, e.g. ``"parallax_error"``.
    value : object
        The offending value, as given.
    expected : str
        What would have been accepted, and where possible how to fix it.
    row : int or str, optional
        Row number (0-based) or star name, for table input.
    """

    def __init__(self, field, value, expected, row=None):
        self.field = field
        self.value = value
        self.expected = expected
        self.row = row
        where = f"row {row}: " if row is not None else ""
        super().__init__(f"{where}{field} = {value!r}: {expected}")


class PerierrWarning(UserWarning):
    """A result that is computed but could mislead; the message says why."""
