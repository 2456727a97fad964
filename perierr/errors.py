"""Exception and warning types raised by perierr.

Every exception perierr raises on purpose derives from :class:`PerierrError`,
so a caller can tell perierr's refusals from a bug (a stray ``ValueError`` or
``TypeError``). Problems with what the user gave derive from
:class:`InputError`, which is also a ``ValueError``::

    PerierrError
    ├── InputError (also ValueError): field, value, expected, row
    │   ├── FocusingError            perierr.models.focusing
    │   ├── OrbitOptionError         perierr.models.orbit.model
    │   ├── PotentialParameterError  perierr.models.orbit.potential_base
    │   └── SolarParameterError      perierr.models.orbit.sun
    └── ChainTooShortError (also RuntimeError)   perierr.sampling.mcmc

Examples
--------
>>> from perierr.errors import InputError, PerierrError
>>> err = InputError("parallax_error", -0.1, "expected an error >= 0 mas")
>>> print(err)
parallax_error = -0.1: expected an error >= 0 mas
>>> isinstance(err, PerierrError) and isinstance(err, ValueError)
True
"""

__all__ = ["InputError", "PerierrError", "PerierrWarning"]


class PerierrError(Exception):
    """Base class of every exception perierr raises on purpose (not a bug)."""


class InputError(PerierrError, ValueError):
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
