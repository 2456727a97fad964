"""Whole catalogues: read in chunks, screen every row with arrays, treat the candidates fully, lose no row.

Modules, in the order the data flows through them: :mod:`.columns` (which column is which field),
:mod:`.reader` (CSV, ECSV, FITS, VOTable, Parquet in chunks of rows), :mod:`.chunk` (a block of rows as
arrays), :mod:`.screening` (stage 1, vectorized: statuses, the straight line at the nominal inputs, linear
sigmas, P(d_ph < D), the cut), :mod:`.treatment` (stage 2, one star at a time with a seed of its own),
:mod:`.store` (the run folder: parts written atomically, resumption), :mod:`.runner` (the two stages on
one or more processes or Dask), :mod:`.output` (the merged table and the ranked summary);
:mod:`.invented` makes invented catalogues for the demo, the tests and the benchmarks.

The results predict statistical encounters, not impact hazards.
"""

from .._lazy import lazy_names

_NAMES = {
    "CatalogueRun": ".runner",
    "ColumnMap": ".columns",
    "PRESETS": ".columns",
    "TreatmentOptions": ".treatment",
    "open_catalogue": ".reader",
    "parse_cut": ".screening",
    "read_row": ".reader",
    "run_catalogue": ".runner",
    "screen_chunk": ".screening",
    "star_seed": ".treatment",
}

__all__ = sorted(_NAMES)
#: Submodules reachable as attributes without importing them first.
_SUBMODULES = ("chunk", "columns", "invented", "output", "reader", "runner", "screening", "store", "treatment")

__getattr__, __dir__ = lazy_names(__name__, globals(), _NAMES, _SUBMODULES)
