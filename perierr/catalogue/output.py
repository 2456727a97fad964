"""The results of a catalogue run: one table (Parquet and ECSV) with units and provenance, and a ranking.

The table has one row per input row, in input order: ``row``, the identifiers,
``status`` and ``reason``, the screen's columns (prefix ``screen_``: the straight
line at the nominal inputs with linear sigmas, and P(d_ph < D) from the linear
Gaussian), and the full treatment's columns (prefix ``mc_``, the budget's
``share_*``, ``dominant_input``, ``cautions``, and the encounter's ``enc_*``; NaN, -1
or empty where a row was not treated, and ``enc_missing`` says why for every blank
``enc_*`` value). Units are astropy units on the columns (stage 2's from
:func:`.treatment.treatment_columns`); the metadata (``meta["perierr"]``)
records the perierr version, the input's checksum, the column mapping, the cut,
the model with its potential and Sun, the prior and the seed, and the cautions
``caution`` (:data:`perierr.cautions.HAZARD`) and ``encounter_caution``
(:data:`perierr.cautions.SHOWER`: the encounter columns are statistical predictions,
not impact hazards); ``summary.json`` beside the tables holds the number of rows of each status.

Both files are written chunk by chunk (the Parquet file with :mod:`pyarrow`, in
astropy's own layout so that ``Table.read`` restores the units and metadata; the
ECSV file as astropy's header followed by Arrow's CSV rows), so memory does not
grow with the catalogue. In the ECSV file an empty text cell (no reason, no
caution) reads back as masked.
"""

from __future__ import annotations

import heapq
import io
import json
import tempfile
from pathlib import Path

import astropy.units as u
import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from ..cautions import HAZARD, SHOWER
from ..report.files import atomic_path
from .store import RunFolder

__all__ = ["column_unit", "format_ranking", "merge_results"]

#: Columns of the screen part that are not outputs of the screen (kept as they are, without the prefix).
_KEEP = ("row", "source_id", "name", "status", "reason", "selected")
#: Stage-2 columns of whole numbers (-1 where a row was not treated).
_INTEGER = ("seed", "mc_n", "mc_n_nonpositive_parallax")
#: Unit of a column, from the end of its name.
_UNITS = (("_myr", u.Myr), ("_pc", u.pc), ("_au", u.AU), ("_kms", u.km / u.s))


def column_unit(name: str):
    """The astropy unit of a results column (None for numbers without unit and for text)."""
    for end, unit in _UNITS:
        if name.endswith(end):
            return unit
    return None


def _final(screen: pa.Table, treated: dict | None, screen_only: bool, spec: dict) -> pa.Table:
    """One chunk of the results: the screen's columns, the final status, and the treatment's columns."""
    status = screen.column("status").to_numpy(zero_copy_only=False).astype(object)
    reason = screen.column("reason").to_numpy(zero_copy_only=False).astype(object)
    selected = screen.column("selected").to_numpy(zero_copy_only=False)
    rows = screen.column("row").to_numpy()
    ok = status == "ok"
    status[ok & ~selected] = "not_selected"
    status[ok & selected] = "screened" if screen_only else "treated"
    cols = {k: screen.column(k) for k in ("row", "source_id", "name") if k in screen.column_names}
    extra = {}
    if not screen_only:
        treated = treated or {"row": np.zeros(0, dtype=np.int64), "status": np.zeros(0, dtype=object),
                              "reason": np.zeros(0, dtype=object)}  # fmt: skip
        t_rows = treated["row"]
        pos = np.clip(np.searchsorted(t_rows, rows), 0, max(len(t_rows) - 1, 0))
        hit = selected & (t_rows[pos] == rows) if len(t_rows) else np.zeros(len(rows), dtype=bool)
        if np.any(selected & ~hit):  # never happens when every batch finished: say so rather than lose a row
            raise RuntimeError("a selected row has no stage-2 part; run the same command again to finish it")
        status[hit] = treated["status"][pos[hit]]
        reason[hit] = treated["reason"][pos[hit]]
        for key, unit in spec.items():  # every stage-2 column, whether or not any row was treated
            if unit is None:
                col = np.full(len(rows), "", dtype=object)
            elif key in _INTEGER:
                col = np.full(len(rows), -1, dtype=np.int64)
            else:
                col = np.full(len(rows), np.nan)
            if key in treated:
                col[hit] = treated[key][pos[hit]]
            if key == "enc_missing":  # a row without encounter values says why, whatever its status
                for s in np.unique(status[status != "treated"]).tolist():  # a few statuses, not every row
                    col[status == s] = _NOT_ANALYSED.get(s, f"row not analysed (status {s})")
            extra[key] = pa.array(col.astype(str) if unit is None else col)
    cols["status"] = pa.array(status.astype(str))
    cols["reason"] = pa.array(reason.astype(str))
    for key in screen.column_names:
        if key not in _KEEP:
            col = screen.column(key)
            cols[f"screen_{key}"] = pc.cast(col, pa.int8()) if col.type == pa.bool_() else col
    cols["selected"] = pc.cast(screen.column("selected"), pa.int8())
    cols.update(extra)
    return pa.table(cols)


#: ``enc_missing`` of rows whose status is not ``treated`` (the others: "row not analysed", with the status).
_NOT_ANALYSED = {"failed": "the analysis of the row failed (see reason)"}


def _treated(folder: RunFolder) -> dict | None:
    files = sorted(folder.parts.glob("treated-*.parquet"))
    if not files:
        return None
    table = pa.concat_tables([pq.read_table(f) for f in files])
    order = np.argsort(table.column("row").to_numpy(), kind="stable")
    return {k: table.column(k).to_numpy(zero_copy_only=False)[order] for k in table.column_names}


def _astropy_header(schema: pa.Schema, meta: dict, spec: dict):
    """An empty astropy table of the results' columns, units and metadata (stage 2's units from ``spec``)."""
    from astropy.table import Table

    t = Table(meta={"perierr": meta})
    for f in schema:
        dtype = {pa.string(): str, pa.int64(): np.int64, pa.int8(): bool, pa.float64(): float}.get(f.type, float)
        if dtype is not float:
            unit = None
        elif f.name in spec:
            unit = u.Unit(spec[f.name]) if spec[f.name] else None
        else:
            unit = column_unit(f.name)
        t[f.name] = np.zeros(0, dtype=dtype) if unit is None else np.zeros(0) * unit
    return t


def merge_results(folder: RunFolder, n_chunks: int, settings: dict, *, screen_only: bool, ecsv: bool, top: int,
                  resumed: bool):  # fmt: skip
    """Merge the parts of a finished run into ``results.parquet`` (and ``results.ecsv``); returns the run."""
    from .runner import CatalogueRun, fingerprint
    from .treatment import treatment_columns

    treated = None if screen_only else _treated(folder)
    radii = (settings.get("treatment") or {}).get("oort_radii")
    spec = {} if screen_only else treatment_columns(settings.get("thresholds", []),
                                                    *([radii] if radii is not None else []))  # fmt: skip
    counts: dict = {}
    ranking = _Ranking(top, settings.get("thresholds", []), screen_only)
    parquet_path = folder.path / "results.parquet"
    ecsv_path = folder.path / "results.ecsv"
    meta = dict(settings, run_fingerprint=fingerprint(settings), caution=HAZARD, encounter_caution=SHOWER)
    n_rows = 0
    writer = None
    lengths: dict = {}
    with atomic_path(parquet_path) as ptmp, atomic_path(ecsv_path) as etmp:
        efile = open(etmp, "wb") if ecsv else None
        try:
            for index in range(n_chunks):
                table = _final(folder.read("screen", index), treated, screen_only, spec)
                if writer is None:
                    header = _astropy_header(table.schema, meta, spec)
                    schema = _astropy_schema(header, folder.path)
                    table = table.cast(schema)
                    # no Arrow schema copy: readers take the footer's metadata, where the text lengths go last
                    writer = pq.ParquetWriter(ptmp, schema, store_schema=False)
                    if efile is not None:
                        text = io.StringIO()
                        header.write(text, format="ascii.ecsv", delimiter=",")
                        efile.write(text.getvalue().encode("utf-8"))
                table = table.cast(writer.schema)
                writer.write_table(table)
                if efile is not None:  # ECSV reads booleans written as 0/1 (Arrow would write true/false)
                    flat = table.cast(pa.schema([pa.field(f.name, pa.int8() if f.type == pa.bool_() else f.type)
                                                 for f in table.schema]))  # fmt: skip
                    pacsv.write_csv(flat, efile, write_options=pacsv.WriteOptions(include_header=False))
                for f in table.schema:
                    if f.type == pa.string() and table.num_rows:
                        longest = pc.max(pc.utf8_length(table.column(f.name))).as_py() or 1
                        lengths[f.name] = max(lengths.get(f.name, 1), longest)
                st = table.column("status").to_numpy(zero_copy_only=False)
                names, n = np.unique(st, return_counts=True)
                for name, k in zip(names.tolist(), n.tolist()):
                    counts[name] = counts.get(name, 0) + k
                ranking.add(table)
                n_rows += table.num_rows
            if writer is not None:
                kept = {k.decode(): v.decode() for k, v in (writer.schema.metadata or {}).items()}
                writer.add_key_value_metadata({**kept, **{f"table::len::{k}": str(v) for k, v in lengths.items()}})
        finally:
            if writer is not None:
                writer.close()
            if efile is not None:
                efile.close()
        if not ecsv:
            etmp.write_bytes(b"")
    if not ecsv:
        ecsv_path.unlink(missing_ok=True)
    counts = dict(sorted(counts.items()))
    summary = {"n_rows": n_rows, "counts": counts}
    (folder.path / "summary.json").write_text(json.dumps(summary, indent=1, sort_keys=True) + "\n", encoding="utf-8")
    results = (parquet_path, ecsv_path) if ecsv else (parquet_path,)
    return CatalogueRun(folder.path, results, n_rows, counts, resumed, settings, *ranking.lists())


def _astropy_schema(header, folder: Path) -> pa.Schema:
    """The Arrow schema, with astropy's metadata, of an empty astropy table (written once, then removed)."""
    with tempfile.TemporaryDirectory(prefix=".header-", dir=folder) as tmp:  # a dot: a leftover is removed
        path = Path(tmp) / "header.parquet"
        header.write(path, format="parquet")
        return pq.read_schema(path)


class _Ranking:
    """The closest and the most probable encounters, kept as the chunks go by (a bounded heap each)."""

    def __init__(self, top: int, thresholds, screen_only: bool):
        from .screening import threshold_label

        self.top = int(top)
        self.closest: list = []
        self.probable: list = []
        prefix = "screen_" if screen_only else "mc_"
        self.distance = "screen_distance_pc" if screen_only else "mc_distance_median_pc"
        self.label = threshold_label(thresholds[0]) if thresholds else None
        self.threshold = thresholds[0] if thresholds else None
        self.probability = None if self.label is None else f"{prefix}p_within_{self.label}"
        self.status = "screened" if screen_only else "treated"

    def add(self, table: pa.Table) -> None:
        if self.top <= 0:
            return
        status = table.column("status").to_numpy(zero_copy_only=False)
        keep = np.flatnonzero(status == self.status)
        if keep.size == 0:
            return
        d = table.column(self.distance).to_numpy()[keep]
        rows = table.column("row").to_numpy()[keep]
        for pos in keep[np.argsort(d, kind="stable")[: self.top]]:
            item = _record(table, int(pos))
            heapq.heappush(self.closest, (-item[self.distance], -item["row"], item))
            if len(self.closest) > self.top:
                heapq.heappop(self.closest)
        if self.probability is not None:
            p = table.column(self.probability).to_numpy()[keep]
            passing = p > 0  # a row no draw brings within the distance is not a probable pass
            keep, rows, p = keep[passing], rows[passing], p[passing]
            for pos in keep[np.lexsort((rows, -p))[: self.top]]:
                item = _record(table, int(pos))
                heapq.heappush(self.probable, (item[self.probability], -item["row"], item))
                if len(self.probable) > self.top:
                    heapq.heappop(self.probable)

    def lists(self) -> tuple:
        closest = [x[2] for x in sorted(self.closest, key=lambda x: (-x[0], -x[1]))]
        probable = [x[2] for x in sorted(self.probable, key=lambda x: (-x[0], -x[1]))]
        return closest, probable


def _record(table: pa.Table, pos: int) -> dict:
    return {k: table.column(k)[pos].as_py() for k in table.column_names}


def format_ranking(run, *, input_name: str | None = None) -> str:
    """The terminal summary of a run: rows by status, the closest and the most probable encounters."""
    s = run.settings
    lines = [f"perierr catalogue run of {input_name or s.get('input')} ({run.n_rows:,} rows, "
             f"{s.get('input_checksum', '')[:19]}...; seed {s.get('seed')})"]  # fmt: skip
    lines.append("Rows by status: " + ", ".join(f"{k} {v:,}" for k, v in run.counts.items()))
    screen_only = s.get("treatment") is None
    how = ("straight line at the nominal inputs, linear sigmas" if screen_only
           else f"Monte Carlo, {s['treatment']['n_samples']:,} draws, model {s['treatment']['model']}")  # fmt: skip
    labels = s.get("thresholds", [])
    if run.closest:
        lines += ["", f"Closest encounters ({how}):", _table(run.closest, screen_only, labels)]
    if run.most_probable and labels:
        lines += ["", f"Most probable passes within {labels[0]}:", _table(run.most_probable, screen_only, labels)]
    passed = run.counts.get("screened" if screen_only else "treated", 0)
    if not passed:
        lines += ["", "No row passed the cut" + (f" ({s['cut']})." if s.get("cut") else ".")]
    if not screen_only:  # the results hold impulses and Oort-radius probabilities
        lines += ["", SHOWER]
    lines += ["", HAZARD]
    lines.append("Results: " + ", ".join(str(p) for p in run.results))
    return "\n".join(lines)


def _probability(p: float, n: int) -> str:
    """A Monte Carlo probability with its resolution: none or all of n draws is a bound, not 0 or 1.

    The bound is the rule of three (95 % upper limit 3/n on a probability with no event in n trials;
    Hanley & Lippman-Hand 1983, JAMA 249, 1743).
    """
    if p <= 0.0:
        return f"< {3.0 / n:.2g}"
    if p >= 1.0:
        return f"> {1.0 - 3.0 / n:.4g}"
    return f"{p:.4g}"


#: The results column of the peak magnitude's median, shown in the ranked summary when rows have it.
_PEAK = "enc_peak_magnitude_median_mag"


def _finite(x) -> bool:
    return isinstance(x, (int, float)) and np.isfinite(x)


def _table(records, screen_only: bool, labels) -> str:
    from .screening import threshold_label

    label = threshold_label(labels[0]) if labels else None
    if screen_only:
        heads = ("row", "id", "t_ph [Myr]", "d_ph [au]", "sigma d [au]", "v_ph [km/s]", f"P(<{labels[0]})")
        keys = ("screen_time_myr", "screen_distance_au", "screen_distance_sigma_au", "screen_speed_kms",
                f"screen_p_within_{label}")  # fmt: skip
    else:
        heads = ("row", "id", "t_ph [Myr]", "d_ph [au]", "16-84 % [au]", "v_ph [km/s]", f"P(<{labels[0]})")
        keys = ("mc_time_median_myr", "mc_distance_median_au", None, "mc_speed_median_kms",
                f"mc_p_within_{label}")  # fmt: skip
        if any(_finite(r.get(_PEAK)) for r in records):  # the peak magnitude, when some row has one
            heads, keys = heads + ("peak G [mag]",), keys + (_PEAK,)
    rows = []
    for r in records:
        ident = r.get("source_id") or r.get("name") or ""
        cells = [str(r["row"]), str(ident)]
        for key in keys:
            if key is None:
                lo, hi = r["mc_distance_q16_pc"], r["mc_distance_q84_pc"]
                au = u.pc.to(u.AU)
                cells.append(f"{lo * au:,.0f}-{hi * au:,.0f}")
            elif key == _PEAK:
                cells.append(f"{r[key]:.1f}" if _finite(r.get(key)) else "-")
            elif key.startswith("mc_p"):
                cells.append(_probability(r[key], r["mc_n"]))
            elif key.startswith("screen_p"):
                cells.append(f"{r[key]:.3g}")
            else:
                cells.append(f"{r[key]:,.4g}" if abs(r[key]) < 1e4 else f"{r[key]:,.0f}")
        rows.append(cells)
    widths = [max(len(h), *(len(c[i]) for c in rows)) for i, h in enumerate(heads)]
    fmt = "  ".join(f"{{:>{w}}}" for w in widths)
    return "\n".join(["  " + fmt.format(*heads)] + ["  " + fmt.format(*c) for c in rows])
