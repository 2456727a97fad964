"""A catalogue run: screen every row, treat the candidates fully, in parallel, resumable, losing no row.

Data flow (one way)::

    reader (chunks of rows) -> screening (stage 1, arrays) -> cut -> treatment (stage 2, per star)
        -> parts in the run folder (store) -> merged results table (output) -> ranked summary

Stage 1 runs in this process, chunk by chunk (reading dominates it). Stage 2
runs in batches of :data:`BATCH_STARS` candidates on an existing engine: this
process (``workers=1``), a :mod:`multiprocessing` pool (``workers > 1``), or a
Dask cluster (``scheduler=ADDRESS``, or ``dask=True`` for a local one) — one
code path, the same batches, the same numbers: each star's stream comes from
the run seed and its identifier (:func:`.treatment.star_seed`).

Statuses of a row in the results (``status`` column; ``reason`` says why):

* ``treated``: passed the cut and was fully analysed (stage-2 columns filled);
* ``screened``: passed the cut in a run without stage 2 (``treatment=None``);
* ``not_selected``: computed by the screen, did not pass the cut;
* ``failed``: passed the cut, and stage 2 refused or failed (the reason says how);
* the screen's own statuses for rows it could not compute (:data:`.screening.STATUSES`):
  ``no_radial_velocity``, ``missing_value``, ``unreadable_value``, ``out_of_range``,
  ``nonpositive_parallax``, ``not_positive_semidefinite``, ``not_finite``.

The mass and the photometry (:data:`.columns.ENCOUNTER_FIELDS`) are inputs of the encounter's effects only: the
screen runs without them, and stage 2 reads them row by row, so a missing or bad mass or magnitude never
costs a row its perihelion (:mod:`.treatment`; under ``focusing`` the mass is part of the model, and a row
with a bad one fails in stage 2 with the reason).
"""

from __future__ import annotations

import hashlib
import json
import multiprocessing
import re
import signal
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pyarrow as pa

from .._version import __version__
from ..errors import InputError
from ..sampling.gaussian import resolve_seed
from ..thresholds import DEFAULT_THRESHOLDS
from .chunk import Chunk
from .columns import ENCOUNTER_FIELDS
from .store import RunFolder
from .treatment import TreatmentOptions, radius_labels, treat_rows

__all__ = ["BATCH_STARS", "CatalogueRun", "PROBLEM_STATUSES", "run_catalogue"]

#: Candidates per stage-2 task: small enough to spread over workers, large enough that sending a task costs
#: little next to its Monte Carlo. Fixed (not tied to the number of workers), so that the parts of a run do
#: not depend on how it was run.
BATCH_STARS = 8

#: Statuses that mean a row could not be computed although it should have been: bad or missing values, a
#: failure in stage 2. A catalogue run with any of them ends with its own exit status (see the CLI).
#: Rows without a radial velocity or with a parallax <= 0 are facts of the catalogue, not failures.
PROBLEM_STATUSES = ("missing_value", "unreadable_value", "out_of_range", "not_positive_semidefinite", "not_finite",
                    "failed")  # fmt: skip

#: The default cut of a run with stage 2: nominal perihelion within 10 pc (common practice, no source: a
#: loose first selection; the linear screen of a star with a weak parallax can miss by several pc).
DEFAULT_CUT = "distance_pc < 10 pc"


@dataclass(frozen=True)
class CatalogueRun:
    """What a catalogue run produced.

    Attributes
    ----------
    folder : Path
        The run folder (``run.json``, ``parts/``, results).
    results : tuple of Path
        The merged results tables (Parquet, and ECSV unless left out).
    n_rows : int
        Rows read; every one of them is in the results exactly once.
    counts : dict
        Status -> number of rows.
    resumed : bool
        Whether finished parts of an earlier, interrupted run were reused.
    settings : dict
        What the run was (recorded in ``run.json`` and in the tables' metadata).
    closest, most_probable : list of dict
        The top rows of the ranked summary (see :mod:`.output`).
    """

    folder: Path
    results: tuple
    n_rows: int
    counts: dict
    resumed: bool
    settings: dict
    closest: list = field(default_factory=list)
    most_probable: list = field(default_factory=list)

    @property
    def n_problems(self) -> int:
        """Rows with a status of :data:`PROBLEM_STATUSES`."""
        return sum(self.counts.get(s, 0) for s in PROBLEM_STATUSES)


def run_catalogue(
    table,
    out,
    *,
    columns=None,
    cut: str | None = DEFAULT_CUT,
    thresholds=DEFAULT_THRESHOLDS,
    treatment: TreatmentOptions | None = None,
    seed: int | None = None,
    chunk_rows: int = 100_000,
    workers: int = 1,
    scheduler: str | None = None,
    dask: bool = False,
    ecsv: bool = True,
    top: int = 10,
    progress: Callable[[str], Callable[[int, int], None] | None] | None = None,
) -> CatalogueRun:
    """Screen a catalogue, treat the rows that pass the cut, and write one results table.

    Parameters
    ----------
    table : str or Path
        CSV, ECSV, FITS, VOTable or Parquet (see :mod:`.reader`).
    out : str or Path
        The run folder. Started again with the same arguments on the same input, the run resumes from
        what is there; other arguments or another input are refused.
    columns : ColumnMap, str, dict or None
        The column mapping (None: detected from the column names; see :mod:`.columns`).
    cut : str or None
        Which screened rows go on to stage 2 (see :func:`.screening.parse_cut`); None or ``"none"``: all
        rows the screen could compute.
    thresholds : sequence
        Distances D of P(d_ph < D).
    treatment : TreatmentOptions or None
        Stage 2's settings; None runs the screen only.
    seed : int, optional
        The run seed; each star's own comes from it and the star's identifier. None: a fresh seed, or
        the recorded one when resuming.
    chunk_rows : int
        Rows read and screened at a time (memory scales with it, not with the catalogue).
    workers : int
        Stage-2 processes (1: this process).
    scheduler : str, optional
        Address of a running Dask scheduler (``tcp://host:8786``) for stage 2.
    dask : bool
        Start a local Dask cluster of ``workers`` processes for stage 2.
    ecsv : bool
        Also write ``results.ecsv`` beside ``results.parquet``.
    top : int
        Rows in each list of the ranked summary.
    progress : callable, optional
        ``progress(label)`` -> a ``progress(done, total)`` callable or None, asked once per stage
        (labels ``"rows screened"`` and ``"stars analysed"``), e.g.
        ``lambda label: perierr.progress.terminal_progress(label=label)``.

    Returns
    -------
    CatalogueRun
    """
    from .output import merge_results
    from .reader import open_catalogue
    from .screening import parse_cut, screen_chunk, threshold_columns

    # every setting is checked before any work, and before the run folder records it
    if int(workers) < 1:
        raise InputError("workers", workers, "expected a number of processes >= 1")
    if scheduler is not None and dask:
        raise InputError("scheduler", scheduler, "give a scheduler address or a local Dask cluster, not both")
    if scheduler is not None:
        check_scheduler_address(scheduler)
    if int(chunk_rows) < 1:
        raise InputError("chunk_rows", chunk_rows, "expected a number of rows >= 1")
    thresholds = tuple(str(t) for t in thresholds)
    threshold_columns(thresholds)
    if treatment is not None:
        treatment = replace(treatment, thresholds=thresholds)  # one set of thresholds for both stages
        treatment.check()
        treatment = replace(treatment, oort_radii=radius_labels(treatment.oort_radii))  # as text: recordable
    catalogue = open_catalogue(table, columns=columns, chunk_rows=int(chunk_rows))
    none = cut is None or str(cut).strip().lower() in ("", "none", "all")
    selector = None if none else parse_cut(cut, thresholds=thresholds)
    folder = RunFolder(out)
    settings = {
        "perierr_version": __version__,
        "input": str(Path(table).name),
        "input_checksum": catalogue.checksum(),
        "input_format": catalogue.format,
        "column_mapping": catalogue.column_map.to_dict(),
        "cut": None if selector is None else selector.text,
        "thresholds": list(thresholds),
        "treatment": None if treatment is None else treatment.to_dict(),
        "chunk_rows": int(chunk_rows),
        "batch_stars": BATCH_STARS,
    }
    recorded = folder.recorded()
    if seed is None and recorded is not None and "seed" in recorded:
        seed = recorded["seed"]  # resuming a run started without a seed: its own seed
    settings["seed"] = resolve_seed(seed)
    if treatment is not None:
        from ..models import make_model

        settings["model"] = make_model(treatment.model).describe()
    resumed = folder.begin(settings)

    # stage 1, chunk by chunk in this process: screen parts, and the inputs of the rows that pass the cut
    total = catalogue.n_rows
    done = 0
    screened = None if progress is None else progress("rows screened")
    n_chunks = 0
    for index, chunk in enumerate(_at_least_one(catalogue.chunks(), catalogue.column_map)):
        n_chunks = index + 1
        if not (folder.has("screen", index) and folder.has("picked", index)):
            cols = screen_chunk(_without_encounter(chunk), thresholds=thresholds)
            if treatment is not None and treatment.distance_prior is not None:
                _prior_advice(cols, treatment.distance_prior)
            ok = cols["status"] == "ok"
            picked = ok if selector is None else (ok & selector(cols))
            cols["selected"] = picked
            folder.write("picked", index, chunk_table(chunk.take(picked)))
            folder.write("screen", index, pa.table(_arrow_columns(cols, chunk)))
        done += len(chunk)
        if screened is not None:
            screened(done, max(done, total or 0))

    # stage 2: batches of candidates on the chosen engine; each finished batch is a part
    if treatment is not None:
        candidates = _candidates(folder, n_chunks)
        batches = [candidates.take(np.arange(a, min(a + BATCH_STARS, len(candidates))))
                   for a in range(0, len(candidates), BATCH_STARS)]  # fmt: skip
        todo = [j for j in range(len(batches)) if not folder.has("treated", j)]
        run_batches(folder, batches, todo, treatment, settings["seed"], workers=int(workers), scheduler=scheduler,
                    dask=dask, progress=None if progress is None else progress("stars analysed"))  # fmt: skip
    return merge_results(folder, n_chunks, settings, screen_only=treatment is None, ecsv=ecsv, top=top,
                         resumed=resumed)  # fmt: skip


def _at_least_one(chunks, column_map):
    """The chunks of the catalogue; one empty chunk for an empty table (its results have the columns)."""
    empty = True
    for chunk in chunks:
        empty = False
        yield chunk
    if empty:
        fields = column_map.all_fields
        sid = np.zeros(0, dtype=np.int64) if "source_id" in fields else None
        name = np.zeros(0, dtype=str) if "name" in fields else None
        yield Chunk(np.zeros(0, dtype=np.int64), {f: np.zeros(0) for f in fields if f not in ("source_id", "name")},
                    {}, sid, name)  # fmt: skip


def _without_encounter(chunk: Chunk) -> Chunk:
    """The block without its encounter inputs (mass, photometry), for the screen: they never refuse a row."""
    if not any(name in chunk.values for name in ENCOUNTER_FIELDS):
        return chunk
    values = {k: v for k, v in chunk.values.items() if k not in ENCOUNTER_FIELDS}
    unreadable = {k: v for k, v in chunk.unreadable.items() if k not in ENCOUNTER_FIELDS}
    return Chunk(chunk.rows, values, unreadable, chunk.source_id, chunk.name)


def _prior_advice(cols: dict, prior: str) -> None:
    """Under a distance prior, a parallax <= 0 still has no straight-line screen: say how to analyse the row."""
    rows = np.flatnonzero(cols["status"] == "nonpositive_parallax")
    for i in rows:  # only the few rows with a parallax <= 0
        cols["reason"][i] = (
            f"{cols['reason'][i].split(':')[0]}: a parallax <= 0 has no straight-line screen, so the cut cannot "
            f"judge the row; analyse it on its own: perierr run TABLE --row {int(cols['row'][i])} "
            f"--distance-prior {prior}"
        )


#: Forms of a Dask scheduler address (the protocols of dask.distributed's communication layer).
_ADDRESS = re.compile(r"^(?:(?:tcp|tls|ucx|inproc)://)?\[?[A-Za-z0-9_.:-]+\]?:\d{1,5}$")


def check_scheduler_address(address: str) -> None:
    """Refuse a scheduler address that cannot be one (before any work)."""
    if not isinstance(address, str) or not _ADDRESS.match(address.strip()):
        raise InputError("scheduler", address, "expected a Dask scheduler address such as tcp://10.0.0.5:8786 "
                         "(protocol tcp, tls or ucx; host; port)")  # fmt: skip


def fingerprint(settings: dict) -> str:
    """sha256 of the settings' canonical JSON (names a run; recorded in the results' metadata)."""
    return hashlib.sha256(json.dumps(settings, sort_keys=True).encode("utf-8")).hexdigest()


#: Prefix of the columns of a picked part that mark unreadable cells of the encounter inputs (stage 2 says so).
_UNREADABLE = "unreadable:"


def chunk_table(chunk: Chunk) -> pa.Table:
    """A block of rows as an Arrow table (``row``, ``source_id``, ``name``, the fields).

    The encounter inputs also keep where their cells were unreadable text (``unreadable:<field>``, bool), so
    that stage 2 can say so; the astrometry's unreadable cells never reach stage 2 (the screen refuses them).
    """
    cols = {"row": pa.array(np.asarray(chunk.rows, dtype=np.int64))}
    if chunk.source_id is not None:
        cols["source_id"] = pa.array(_plain(chunk.source_id))
    if chunk.name is not None:
        cols["name"] = pa.array(np.asarray(chunk.name, dtype=str))
    for key, values in chunk.values.items():
        cols[key] = pa.array(np.asarray(values, dtype=float))
    for key in ENCOUNTER_FIELDS:
        if key in chunk.values:
            flags = chunk.unreadable.get(key)
            flags = np.zeros(len(chunk), dtype=bool) if flags is None else np.asarray(flags, dtype=bool)
            cols[_UNREADABLE + key] = pa.array(flags)
    return pa.table(cols)


def table_chunk(table: pa.Table) -> Chunk:
    """The inverse of :func:`chunk_table`."""
    names = table.column_names
    values = {k: table.column(k).to_numpy() for k in names
              if k not in ("row", "source_id", "name") and not k.startswith(_UNREADABLE)}  # fmt: skip
    unreadable = {}
    for k in names:
        if k.startswith(_UNREADABLE):
            flags = np.asarray(table.column(k).to_numpy(zero_copy_only=False), dtype=bool)
            if flags.any():
                unreadable[k[len(_UNREADABLE) :]] = flags
    sid = table.column("source_id").to_numpy(zero_copy_only=False) if "source_id" in names else None
    name = table.column("name").to_numpy(zero_copy_only=False).astype(str) if "name" in names else None
    return Chunk(table.column("row").to_numpy(), values, unreadable, sid, name)


def _plain(ids) -> np.ndarray:
    ids = np.asarray(ids)
    return ids.astype(np.int64) if ids.dtype.kind in "iu" else ids.astype(str)


def _arrow_columns(cols: dict, chunk: Chunk) -> dict:
    """The screen's columns of a block, with the rows' identifiers after ``row``."""
    out = {"row": pa.array(np.asarray(cols["row"], dtype=np.int64))}
    if chunk.source_id is not None:
        out["source_id"] = pa.array(_plain(chunk.source_id))
    if chunk.name is not None:
        out["name"] = pa.array(np.asarray(chunk.name, dtype=str))
    for key, values in cols.items():
        if key not in out:
            arr = np.asarray(values)
            out[key] = pa.array(arr.astype(str) if arr.dtype.kind in "OU" else arr)
    return out


def _candidates(folder: RunFolder, n_chunks: int) -> Chunk:
    tables = [folder.read("picked", i) for i in range(n_chunks)]
    tables = [t for t in tables if t.num_rows] or tables[:1]
    if not tables:
        return Chunk(np.zeros(0, dtype=np.int64), {})
    return table_chunk(pa.concat_tables(tables, promote_options="permissive"))


def treat_batch(batch: Chunk, treatment: TreatmentOptions, seed: int) -> pa.Table:
    """Stage 2 of one batch, as the part it is written to (runs in a worker)."""
    cols, status, reason = treat_rows(batch, treatment, seed)
    table = {"row": pa.array(np.asarray(batch.rows, dtype=np.int64)), "status": pa.array(status.astype(str)),
             "reason": pa.array(reason.astype(str))}  # fmt: skip
    for key, values in cols.items():
        arr = np.asarray(values)
        table[key] = pa.array(arr.astype(str) if arr.dtype.kind in "OU" else arr)
    return pa.table(table)


def _task(args):
    index, batch, treatment, seed = args
    return index, treat_batch(batch, treatment, seed)


def _quiet_worker() -> None:  # Ctrl-C is the parent's to handle: it stops the pool
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def run_batches(folder, batches, todo, treatment, seed, *, workers=1, scheduler=None, dask=False, progress=None):
    """Run the stage-2 batches ``todo`` and write each finished one as a part (any order of finishing)."""
    total = sum(len(b) for b in batches)
    done = total - sum(len(batches[j]) for j in todo)
    tasks = [(j, batches[j], treatment, seed) for j in todo]

    def finished(index, table):
        nonlocal done
        folder.write("treated", index, table)
        done += len(batches[index])
        if progress is not None:
            progress(done, total)

    if not tasks:
        return
    if scheduler is not None or dask:
        _on_dask(tasks, finished, workers=workers, scheduler=scheduler)
    elif workers == 1:
        for task in tasks:
            finished(*_task(task))
    else:
        pool = multiprocessing.get_context("spawn").Pool(workers, initializer=_quiet_worker)
        try:
            for index, table in pool.imap_unordered(_task, tasks):
                finished(index, table)
            pool.close()
        except BaseException:  # Ctrl-C or a failure: stop the workers now; finished parts stay
            pool.terminate()
            raise
        finally:
            pool.join()


def _on_dask(tasks, finished, *, workers, scheduler) -> None:
    """Stage 2 on Dask distributed: a running scheduler, or a local cluster started for the run."""
    try:
        from distributed import Client, LocalCluster, as_completed
    except ImportError:  # pragma: no cover - a dependency of perierr
        raise InputError("scheduler", scheduler, "needs the dask[distributed] package") from None
    cluster = None
    try:
        if scheduler is None:
            cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                   dashboard_address=None, silence_logs=50)  # fmt: skip
            client = Client(cluster)
        else:
            try:
                client = Client(scheduler, timeout="10s")
            except (OSError, TimeoutError) as exc:
                raise InputError("scheduler", scheduler, f"no Dask scheduler answered there ({exc})") from None
        with client:
            futures = [client.submit(_task, task, pure=False) for task in tasks]
            try:
                for future in as_completed(futures):
                    finished(*future.result())
            except BaseException:
                client.cancel(futures)
                raise
    finally:
        if cluster is not None:
            cluster.close()
