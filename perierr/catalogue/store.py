"""The folder of a catalogue run: settings, finished parts written atomically, resumption.

Layout of ``OUT/``::

    run.json              what the run is (input checksum, column mapping, cut, treatment, seed, chunking)
    parts/screen-000003.parquet   stage 1 of input chunk 3 (every row of it)
    parts/picked-000003.parquet   the inputs of chunk 3's rows that passed the cut
    parts/treated-000012.parquet  stage 2 of candidate batch 12
    results.parquet, results.ecsv the merged table, written last

Each part is written to a temporary name in the same folder, flushed to disk and
renamed (:func:`perierr.report.files.atomic_path`): a part either exists whole or not at
all, so a run stopped at any instant (Ctrl-C, ``kill -9``, a crash, a full disk)
and started again with the same command skips what is there and ends with the
same results. A folder holding another run (another input, other settings) is
refused, never mixed.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from ..errors import InputError
from ..report.files import atomic_path

__all__ = ["RunFolder"]

#: Format tag of ``run.json``.
FORMAT = "perierr catalogue run 1"


class RunFolder:
    """The output folder of one catalogue run.

    Parameters
    ----------
    path : str or Path
        The folder (created if missing).
    """

    def __init__(self, path):
        self.path = Path(path)
        if self.path.exists() and not self.path.is_dir():
            raise InputError("--out", str(self.path), "is a file; expected a folder for the run's results")
        self.parts = self.path / "parts"

    @property
    def settings_file(self) -> Path:
        """``run.json``."""
        return self.path / "run.json"

    def recorded(self) -> dict | None:
        """The settings of the run recorded in the folder, or None for a new folder."""
        if not self.settings_file.exists():
            return None
        try:
            data = json.loads(self.settings_file.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            raise InputError("--out", str(self.path), f"holds an unreadable run.json ({exc}); give another "
                             "folder or remove this one") from None  # fmt: skip
        if data.get("format") != FORMAT:
            raise InputError("--out", str(self.path), f"holds a run.json of another kind (format "
                             f"{data.get('format')!r}); give another folder") from None  # fmt: skip
        return data["settings"]

    def begin(self, settings: dict) -> bool:
        """Start the run, or resume the one recorded; returns True when resuming.

        Raises
        ------
        InputError
            The folder holds a run with other settings (each difference is named), or files that are
            not a run's.
        """
        old = self.recorded()
        if old is None:
            if self.path.exists() and any(p.name not in ("parts",) for p in self.path.iterdir()):
                raise InputError("--out", str(self.path), "is a folder with other files in it; give a new or "
                                 "empty folder (a run's folder can be reused by the same command)")  # fmt: skip
            self.parts.mkdir(parents=True, exist_ok=True)
            _write_atomic_bytes(self.settings_file, _dump({"format": FORMAT, "settings": settings}))
            return False
        if old != settings:
            was, now = _flat(old), _flat(settings)
            changed = sorted(k for k in set(was) | set(now) if was.get(k) != now.get(k))
            detail = "; ".join(f"{k}: {_short(was.get(k))} -> {_short(now.get(k))}" for k in changed)
            raise InputError("--out", str(self.path), f"holds a run of another input or other settings "
                             f"({detail}); resume it with the same command, or give another folder")  # fmt: skip
        self.parts.mkdir(parents=True, exist_ok=True)
        self._remove_leftovers()
        return True

    def _remove_leftovers(self) -> None:
        """Remove the temporary files of writes a killed run left half done (their names start with a dot)."""
        for folder in (self.path, self.parts):
            for leftover in folder.glob(".*"):
                if leftover.is_dir():
                    shutil.rmtree(leftover, ignore_errors=True)
                else:
                    leftover.unlink(missing_ok=True)

    def part(self, kind: str, index: int) -> Path:
        """Path of a part (``kind`` is "screen", "picked" or "treated")."""
        return self.parts / f"{kind}-{index:06d}.parquet"

    def has(self, kind: str, index: int) -> bool:
        """Whether the part is finished."""
        return self.part(kind, index).exists()

    def write(self, kind: str, index: int, table: pa.Table) -> None:
        """Write a part atomically."""
        path = self.part(kind, index)
        with atomic_path(path) as tmp:
            pq.write_table(table, tmp)

    def read(self, kind: str, index: int) -> pa.Table:
        """A finished part."""
        return pq.read_table(self.part(kind, index))


def _flat(settings: dict, prefix: str = "") -> dict:
    """Nested settings as dotted keys (``treatment.n_samples``), so that a refusal names what changed."""
    out = {}
    for key, value in settings.items():
        if isinstance(value, dict) and value:
            out.update(_flat(value, f"{prefix}{key}."))
        else:
            out[f"{prefix}{key}"] = value
    return out


def _short(value) -> str:
    text = json.dumps(value, sort_keys=True)
    return text if len(text) <= 80 else text[:77] + "..."


def _dump(data) -> bytes:
    return (json.dumps(data, indent=1, sort_keys=True) + "\n").encode("utf-8")


def _write_atomic_bytes(path: Path, data: bytes) -> None:
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)
