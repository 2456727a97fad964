"""A block of catalogue rows as arrays: what the reader hands to the screen and the full treatment.

Nothing here holds one Python object per row: every field is one numpy array over the block's rows.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Chunk"]


@dataclass(frozen=True)
class Chunk:
    """Consecutive rows of a catalogue, in catalogue units (:data:`perierr.units.FIELD_UNITS`).

    Attributes
    ----------
    rows : ndarray of int64, shape (n,)
        Row number (0-based, in the input file) of each row of the block.
    values : dict of str to ndarray
        perierr field name (``parallax``, ``radial_velocity_error``, ``ra_dec_corr``, ``mass``, ...) ->
        float64 array of shape (n,), in catalogue units. NaN where the cell is empty, masked, or not
        a number. Only fields that the table has (after the column mapping) are present: a field
        that is absent from the table is absent here.
    unreadable : dict of str to ndarray
        Field -> bool array (n,): True where the cell held text that is not a number (its value is NaN).
        Fields without such cells may be absent.
    source_id : ndarray or None
        Identifier of each row as given (int64 array, or an array of str), None when the table has none.
    name : ndarray or None
        Array of str, None when the table has no name column.
    """

    rows: np.ndarray
    values: dict
    unreadable: dict = field(default_factory=dict)
    source_id: np.ndarray | None = None
    name: np.ndarray | None = None

    def __len__(self) -> int:
        return int(np.shape(self.rows)[0])

    def take(self, index) -> Chunk:
        """The rows selected by ``index`` (a bool mask or integer positions), as a new block."""
        pick = {k: np.asarray(v)[index] for k, v in self.values.items()}
        bad = {k: np.asarray(v)[index] for k, v in self.unreadable.items()}
        sid = None if self.source_id is None else np.asarray(self.source_id)[index]
        name = None if self.name is None else np.asarray(self.name)[index]
        return Chunk(np.asarray(self.rows)[index], pick, bad, sid, name)
