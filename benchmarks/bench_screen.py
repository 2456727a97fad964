"""Stage 1 of a catalogue run: reading + vectorized screen_chunk over a whole invented catalogue.

Every star is invented (random positions, distances, velocities, catalogue-like errors and
correlations; a few % bad rows; about 15 % of the rows without a radial velocity). The catalogue is
written to a temporary folder as Parquet and FITS; each format is then read chunk by chunk and
screened in a fresh process, which reports its wall time (reading and screening apart) and its peak
memory (``ru_maxrss``: the process's resident high-water mark, interpreter and libraries included).

The reference, in the same run: the per-row path (``perierr.screen.iter_screen``: an
ObservedStar + linearize per row of an astropy Table) on a random 2,000-row subsample, extrapolated
per row. Both answers are compared on that subsample first (statuses, and values and sigmas to 1e-10
relative), so the speeds are compared at matched accuracy.

    python benchmarks/bench_screen.py                    # 1e6 rows, Parquet and FITS
    python benchmarks/bench_screen.py --rows 10000000    # the memory target (Parquet only above 2e6 rows)

Targets: 1e6 rows including reading under 5 s on one core; peak memory below 2 GB for 1e7 rows.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shlex
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402

from perierr.catalogue.invented import invented_correlations  # noqa: E402
from perierr.units import KMS_PER_MASYR_AT_1MAS  # noqa: E402

PIECE_ROWS = 250_000  # rows generated (and written) at a time
FITS_MAX_ROWS = 2_000_000  # FITS is written whole by astropy: only up to this size
NUMBERS = ("time_myr", "distance_pc", "speed_kms", "time_sigma_myr", "distance_sigma_pc")


# ------------------------------------------------------------------------------------------- the catalogue


def invented_piece(rng, start: int, n: int) -> dict:
    """``n`` invented rows (archive-style column names, catalogue units, NaN = empty)."""
    ra = rng.uniform(0.0, 360.0, n)
    dec = np.degrees(np.arcsin(rng.uniform(-1.0, 1.0, n)))
    dist = 10 ** rng.uniform(1.0, 3.5, n)  # 10 pc .. 3 kpc
    eplx = 10 ** rng.uniform(-1.7, -0.5, n)  # 0.02 .. 0.3 mas
    plx = 1000.0 / dist + rng.normal(0.0, 1.0, n) * eplx  # a few per cent come out <= 0, as in a real catalogue
    v = rng.normal(0.0, 35.0, (n, 3)) + np.array([-11.0, -12.0, -7.0])
    close = rng.uniform(size=n) < 0.002  # a few stars sent at the Sun
    v[close, 0] = -np.abs(rng.normal(30.0, 10.0, close.sum()))
    v[close, 1:] = rng.normal(0.0, 0.3, (close.sum(), 2))
    true_plx = 1000.0 / dist
    cols = {
        "source_id": 7_000_000_000 + np.arange(start, start + n, dtype=np.int64),
        "ra": ra,
        "dec": dec,
        "parallax": plx,
        "pmra": v[:, 1] * true_plx / KMS_PER_MASYR_AT_1MAS + rng.normal(0.0, 1.0, n) * eplx,
        "pmdec": v[:, 2] * true_plx / KMS_PER_MASYR_AT_1MAS + rng.normal(0.0, 1.0, n) * eplx,
        "radial_velocity": v[:, 0] + rng.normal(0.0, 1.0, n),
        "ra_error": 0.7 * eplx * rng.uniform(0.8, 1.2, n),
        "dec_error": 0.6 * eplx * rng.uniform(0.8, 1.2, n),
        "parallax_error": eplx,
        "pmra_error": 1.1 * eplx * rng.uniform(0.8, 1.2, n),
        "pmdec_error": eplx * rng.uniform(0.8, 1.2, n),
        "radial_velocity_error": 10 ** rng.uniform(-0.5, 0.8, n),
    }
    cols.update(invented_correlations(rng, n))
    # bad rows: no radial velocity (15 %), and a few per mille of each other fault
    no_rv = rng.uniform(size=n) < 0.15
    cols["radial_velocity"][no_rv] = np.nan
    cols["radial_velocity_error"][no_rv & (rng.uniform(size=n) < 0.5)] = np.nan
    kind = rng.integers(0, 1000, n)
    cols["parallax"][kind == 0] = np.nan
    cols["dec"][kind == 1] = 95.0
    cols["pmra_error"][kind == 2] = -0.1
    cols["parallax_pmra_corr"][kind == 3] = 1.5
    for name, value in (("parallax_pmra_corr", 0.95), ("parallax_pmdec_corr", 0.95), ("pmra_pmdec_corr", -0.95)):
        cols[name][kind == 4] = value
    for name in ("pmra", "pmdec", "radial_velocity"):
        cols[name][kind == 5] = 0.0
    cols["ra_dec_corr"][kind == 6] = np.nan
    return cols


def write_catalogue(folder: Path, rows: int, seed: int, fits: bool) -> tuple:
    """Parquet (and FITS) files of ``rows`` invented rows; also the first piece, kept for the reference."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    rng = np.random.default_rng(seed)
    parquet = folder / "invented.parquet"
    writer, first, pieces = None, None, []
    for start in range(0, rows, PIECE_ROWS):
        piece = invented_piece(rng, start, min(PIECE_ROWS, rows - start))
        table = pa.table({k: pa.array(v, from_pandas=True) for k, v in piece.items()})  # NaN -> null (empty cell)
        writer = writer or pq.ParquetWriter(parquet, table.schema)
        writer.write_table(table)
        first = first or piece
        if fits:
            pieces.append(piece)
    writer.close()
    paths = {"parquet": parquet}
    if fits:
        from astropy.table import Table

        whole = {k: np.concatenate([p[k] for p in pieces]) for k in pieces[0]}
        Table(whole).write(folder / "invented.fits")
        paths["fits"] = folder / "invented.fits"
    return paths, first


# ------------------------------------------------------------------------------------------- the timed run


def read_chunks(path: Path, chunk_rows: int):
    """Chunks of the file: perierr.catalogue.reader if it is there, else pyarrow / astropy directly."""
    try:
        from perierr.catalogue.reader import open_catalogue
    except ImportError:
        open_catalogue = None
    if open_catalogue is not None:
        yield from open_catalogue(path, chunk_rows=chunk_rows).chunks()
        return
    from perierr.catalogue.chunk import Chunk

    if path.suffix == ".parquet":
        import pyarrow.parquet as pq

        start = 0
        for batch in pq.ParquetFile(path).iter_batches(batch_size=chunk_rows):
            cols = {name: batch.column(name).to_numpy(zero_copy_only=False) for name in batch.schema.names}
            sid = cols.pop("source_id")
            values = {k: np.asarray(v, dtype=np.float64) for k, v in cols.items()}
            yield Chunk(np.arange(start, start + batch.num_rows), values, {}, sid)
            start += batch.num_rows
        return
    from astropy.io import fits

    with fits.open(path, memmap=True) as hdul:
        data = hdul[1].data
        for start in range(0, len(data), chunk_rows):
            part = data[start : start + chunk_rows]
            values = {k: np.asarray(part[k], dtype=np.float64) for k in data.names if k != "source_id"}
            yield Chunk(np.arange(start, start + len(part)), values, {}, np.asarray(part["source_id"]))


def child(path: Path, chunk_rows: int) -> dict:
    """Read and screen the whole file (this process only); wall times and peak memory."""
    from perierr.catalogue.screening import STATUSES, passes, screen_chunk

    t_read = t_screen = 0.0
    counts = dict.fromkeys(STATUSES, 0)
    rows = passed = 0
    chunks = read_chunks(path, chunk_rows)
    while True:
        t0 = time.perf_counter()
        chunk = next(chunks, None)
        t1 = time.perf_counter()
        t_read += t1 - t0
        if chunk is None:
            break
        out = screen_chunk(chunk)
        keep = passes(out)
        t_screen += time.perf_counter() - t1
        rows += len(chunk)
        passed += int(keep.sum())
        names, n = np.unique(out["status"].astype(str), return_counts=True)
        for name, k in zip(names, n):
            counts[str(name)] += int(k)
    return {"rows": rows, "read_s": t_read, "screen_s": t_screen, "peak_mb": peak_memory_mb(), "counts": counts,
            "ok": passed}  # fmt: skip


def peak_memory_mb() -> float:
    """This process's resident high-water mark: VmHWM (Linux; it is reset by exec, unlike ru_maxrss, which keeps
    the parent's size at the fork), else ru_maxrss."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024.0  # kB
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # kB on Linux


def run_child(path: Path, chunk_rows: int) -> dict:
    cmd = [sys.executable, __file__, "--child", str(path), "--chunk-rows", str(chunk_rows)]
    done = subprocess.run(
        cmd, capture_output=True, text=True, check=True, env={**os.environ, "OPENBLAS_NUM_THREADS": "1"}
    )
    return json.loads(done.stdout.strip().splitlines()[-1])


# ------------------------------------------------------------------------------------------- the reference


def reference(piece: dict, n: int, seed: int) -> dict:
    """Per-row path (iter_screen on an astropy Table) vs screen_chunk on the same random rows."""
    from astropy.table import MaskedColumn, Table

    from perierr.catalogue.chunk import Chunk
    from perierr.catalogue.screening import screen_chunk
    from perierr.errors import PerierrWarning
    from perierr.screen import iter_screen

    pick = np.sort(np.random.default_rng(seed).choice(len(piece["ra"]), size=n, replace=False))
    sub = {k: v[pick] for k, v in piece.items()}
    table = Table({k: MaskedColumn(v, mask=np.isnan(v)) if v.dtype.kind == "f" else v for k, v in sub.items()})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        t0 = time.perf_counter()
        old = list(iter_screen(table))
        t_old = time.perf_counter() - t0
    values = {k: v for k, v in sub.items() if k != "source_id"}
    screen_chunk(Chunk(np.arange(10), {k: v[:10] for k, v in values.items()}))  # warm-up: first imports
    t0 = time.perf_counter()
    new = screen_chunk(Chunk(np.arange(n), values, {}, sub["source_id"]))
    t_new = time.perf_counter() - t0
    old_ok = np.array([r.status == "ok" for r in old])
    same_status = bool(np.array_equal(old_ok, new["status"] == "ok"))
    worst = 0.0
    for name, attr in zip(NUMBERS, ("time_myr", "distance_pc", "speed_kms", "time_sigma", "distance_sigma")):
        a = np.array([getattr(r, attr) for r in old], dtype=float)[old_ok]
        b = new[name][old_ok]
        nonzero = a != 0
        worst = max(worst, float(np.max(np.abs(a[nonzero] - b[nonzero]) / np.abs(a[nonzero]), initial=0.0)))
        worst = max(worst, float(np.max(np.abs(b[~nonzero]), initial=0.0)))
    return {
        "n": n,
        "old_s": t_old,
        "new_s": t_new,
        "same_ok_rows": same_status,
        "worst_rel": worst,
        "ok": int(old_ok.sum()),
    }


# ------------------------------------------------------------------------------------------- main


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=float, default=1e6, help="rows of the invented catalogue (1e7: memory target)")
    parser.add_argument("--chunk-rows", type=int, default=None, help="rows per chunk (default: the reader's)")
    parser.add_argument("--subsample", type=int, default=2000, help="rows of the per-row reference")
    parser.add_argument("--seed", type=int, default=2024)
    parser.add_argument("--no-fits", action="store_true", help="Parquet only")
    parser.add_argument("--child", type=Path, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.chunk_rows is None:
        try:
            from perierr.catalogue.reader import DEFAULT_CHUNK_ROWS as default_rows
        except ImportError:
            default_rows = 100_000
        args.chunk_rows = default_rows
    if args.child is not None:
        print(json.dumps(child(args.child, args.chunk_rows)))
        return
    rows = int(args.rows)
    print("command: OPENBLAS_NUM_THREADS=1 python " + " ".join(shlex.quote(a) for a in [__file__, *sys.argv[1:]]))
    print(f"invented catalogue: {rows:,} rows, chunks of {args.chunk_rows:,}, seed {args.seed}; one core")
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        fits = not args.no_fits and rows <= FITS_MAX_ROWS
        paths, first = write_catalogue(Path(tmp), rows, args.seed, fits)
        sizes = ", ".join(f"{k} {p.stat().st_size / 1e6:,.0f} MB" for k, p in paths.items())
        print(f"written in {time.perf_counter() - t0:.1f} s ({sizes})")
        ref = reference(first, min(args.subsample, len(first["ra"])), args.seed)
        per_row = ref["old_s"] / ref["n"]
        print(
            f"reference, per-row path (perierr.screen.iter_screen) on {ref['n']:,} random rows: {ref['old_s']:.2f} s "
            f"= {1 / per_row:,.0f} rows/s; screen_chunk on the same rows {ref['new_s'] * 1e3:.1f} ms"
        )
        print(
            f"  agreement: ok rows identical {ref['same_ok_rows']} ({ref['ok']:,} ok); worst relative difference "
            f"of values and sigmas {ref['worst_rel']:.1e} (required <= 1e-10)"
        )
        if not (ref["same_ok_rows"] and ref["worst_rel"] <= 1e-10):
            raise SystemExit("the vectorized and per-row answers disagree: speeds not comparable")
        for fmt, path in paths.items():
            res = run_child(path, args.chunk_rows)
            total = res["read_s"] + res["screen_s"]
            print(
                f"{fmt:8s}: {res['rows']:,} rows in {total:.2f} s (read {res['read_s']:.2f} s, screen "
                f"{res['screen_s']:.2f} s) = {res['rows'] / total:,.0f} rows/s; per-row path extrapolated "
                f"{per_row * res['rows']:,.0f} s: ratio {per_row * res['rows'] / total:,.0f}x; peak memory "
                f"{res['peak_mb']:,.0f} MB (process VmHWM)"
            )
        counts = ", ".join(f"{k} {v:,}" for k, v in res["counts"].items() if v)
        print(f"statuses: {counts}")
        target = "5 s for 1e6 rows" if rows <= 1_000_000 else "peak below 2 GB"
        print(f"targets: {target} (wall times on a shared 2-core machine are noisy)")


if __name__ == "__main__":
    main()
