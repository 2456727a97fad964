"""Mutation score of perierr's numerical core, from a finished ``mutmut run``.

Reads mutmut's per-file results of every group run by ``tools/mutation_run.py``
(``.mutation/<group>/mutants/``), sets aside the mutants
listed as equivalent (with a reason each) in ``tests/mutation/equivalent*.toml``,
and writes ``tests/mutation/REPORT.md``: the score per module and overall, and
every surviving mutant with its diff. A mutant counts as killed when a test
failed, crashed or timed out on it (mutmut's "killed", "timeout", "segfault").

The score is killed / (all mutants - equivalent). A mutant no test reaches
("no tests") counts as a survivor: code no test runs is code no test checks.

A full pass takes longer than one working session on the 2-core machine, and
``.mutation/`` is scratch space, so ``--save`` keeps each finished group's
exit codes in ``tests/mutation/results.json`` together with a digest of the
group's source and test files. A group without a live run is read from there
when its digest still matches the files; otherwise the report calls it stale.

Run (from the repository root; see DEVELOPERS.md for the wall time)::

    pip install mutmut
    python tools/mutation_run.py
    python tools/mutation_report.py
"""

from __future__ import annotations

import argparse
import datetime
import hashlib
import importlib.util
import json
import subprocess
import sys
from collections import Counter, defaultdict
from pathlib import Path

import tomllib

KILLED = {1: "killed", 3: "killed", 36: "timeout", 24: "timeout", -24: "timeout", 152: "timeout", 255: "timeout",
          -11: "segfault", -9: "segfault", 37: "caught by type check"}
SURVIVED = {0: "survived", 5: "no tests", 33: "no tests", None: "not checked"}


def module_of(name: str) -> str:
    """``perierr.budget.game.x_explained_variance__mutmut_3`` -> ``perierr.budget.game``."""
    head = name.split("__mutmut_")[0]
    return head.rsplit(".", 1)[0]


def read_results(root: Path) -> dict:
    """Mutant name -> (mutmut exit code, group folder), from every group's ``mutants/**/*.meta``."""
    out = {}
    for group in sorted(p for p in (root / ".mutation").glob("*") if (p / "mutants").is_dir()):
        for meta in sorted((group / "mutants").rglob("*.meta")):
            codes = json.loads(meta.read_text(encoding="utf-8")).get("exit_code_by_key", {})
            out.update({name: (code, group) for name, code in codes.items()})
    return out


def _groups(root: Path) -> dict:
    """The groups of ``tools/mutation_run.py``: name -> (source patterns, test files, slow)."""
    spec = importlib.util.spec_from_file_location("mutation_run", root / "tools" / "mutation_run.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module.GROUPS


def group_digest(root: Path, group: str, tree: Path | None = None) -> str:
    """sha256 of the group's source and test files (paths and bytes, sorted) as they are in ``tree``.

    ``tree`` defaults to ``root``; a group's scratch copy ``.mutation/<group>/`` holds the files as they were
    when the group ran, so its digest says what the saved result is a result of.
    """
    tree = root if tree is None else tree
    sources, tests, _ = _groups(root)[group]
    files = sorted({f for pattern in sources for f in tree.glob(pattern) if f.suffix == ".py"}
                   | {tree / t for t in tests if (tree / t).exists()})
    h = hashlib.sha256()
    for f in files:
        h.update(str(f.relative_to(tree)).encode())
        h.update(f.read_bytes())
    return h.hexdigest()


def _finished(work: Path) -> bool:
    """Whether mutmut's run of a group ended (its log's last line is the final rate)."""
    log = work / "mutmut.log"
    return log.exists() and log.read_text(encoding="utf-8", errors="replace").rstrip().endswith("mutations/second")


def save_snapshot(root: Path, out: Path) -> list:
    """Store the exit codes of every group run in ``.mutation/`` in ``out``; returns the groups saved."""
    data = json.loads(out.read_text(encoding="utf-8")) if out.exists() else {}
    commit = subprocess.run(["git", "rev-parse", "--short", "HEAD"], capture_output=True, text=True, cwd=root,
                            check=False).stdout.strip()
    saved = []
    for group in sorted(p.name for p in (root / ".mutation").glob("*") if (p / "mutants").is_dir()):
        work = root / ".mutation" / group
        if group not in _groups(root) or not _finished(work):
            continue  # an unfinished run is not a result
        codes = {}
        for meta in sorted((work / "mutants").rglob("*.meta")):
            codes.update(json.loads(meta.read_text(encoding="utf-8")).get("exit_code_by_key", {}))
        if not codes or any(c is None for c in codes.values()):
            continue
        data[group] = {"digest": group_digest(root, group, work), "saved_at_commit": commit,
                       "date": datetime.date.today().isoformat(), "exit_codes": dict(sorted(codes.items()))}
        saved.append(group)
    out.write_text(json.dumps(data, indent=1, sort_keys=True) + "\n", encoding="utf-8")
    return saved


def read_snapshot(root: Path, path: Path, live: set) -> tuple:
    """Results of saved groups without a live run whose files are unchanged, and the names of stale ones."""
    if not path.exists():
        return {}, []
    out, stale = {}, []
    for group, entry in json.loads(path.read_text(encoding="utf-8")).items():
        if group in live:
            continue
        if group not in _groups(root) or entry["digest"] != group_digest(root, group):
            stale.append(group)
            continue
        out.update({name: (code, None) for name, code in entry["exit_codes"].items()})
    return out, stale


def read_equivalent(folder: Path) -> dict:
    """Mutant name -> reason it is equivalent (behaves exactly like the original), from ``equivalent*.toml``."""
    out = {}
    for path in sorted(folder.glob("equivalent*.toml")):
        data = tomllib.loads(path.read_text(encoding="utf-8"))
        out.update({name: entry["reason"] for name, entry in data.get("equivalent", {}).items()})
    return out


def diff_of(name: str, group: Path) -> str:
    """The mutant's diff, as ``mutmut show`` prints it in its group's folder (only the changed lines)."""
    if group is None:
        return "(saved result: re-run the group to see the diff)"
    text = subprocess.run(["mutmut", "show", name], capture_output=True, text=True, check=False, cwd=group).stdout
    lines = [ln for ln in text.splitlines() if ln[:1] in "+-" and not ln.startswith(("+++", "---"))]
    return "\n".join(lines)


def main(argv=None) -> int:
    """Write the report; returns the exit status."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--root", type=Path, default=Path("."))
    parser.add_argument("--equivalent", type=Path, default=Path("tests/mutation"), help="folder of equivalent*.toml")
    parser.add_argument("--out", type=Path, default=Path("tests/mutation/REPORT.md"))
    parser.add_argument("--no-diffs", action="store_true", help="list survivors without their diffs (fast)")
    parser.add_argument("--snapshot", type=Path, default=Path("tests/mutation/results.json"))
    parser.add_argument("--save", action="store_true", help="store finished groups' results in --snapshot first")
    args = parser.parse_args(argv)
    if args.save:
        print(f"saved: {', '.join(save_snapshot(args.root, args.snapshot)) or 'no finished group'}")
    results = read_results(args.root)
    live = {g.name for g in {group for _, group in results.values()}}
    saved, stale_groups = read_snapshot(args.root, args.snapshot, live)
    results.update(saved)
    if not results:
        print("no mutmut results under .mutation/: run `python tools/mutation_run.py` first", file=sys.stderr)
        return 2
    equivalent = read_equivalent(args.equivalent)
    stale = sorted(set(equivalent) - set(results))
    # an entry whose mutant a test kills is wrong (or its number now names another mutant)
    contradicted = sorted(n for n in equivalent if n in results and results[n][0] in KILLED)
    per = defaultdict(Counter)
    survivors = defaultdict(list)
    for name, (code, group) in sorted(results.items()):
        mod = module_of(name)
        if name in equivalent:
            per[mod]["equivalent"] += 1
        elif code in KILLED:
            per[mod]["killed"] += 1
        else:
            per[mod]["survived"] += 1
            survivors[mod].append((name, SURVIVED.get(code, f"exit code {code}"), group))
    total = Counter()
    rows = []
    for mod in sorted(per):
        c = per[mod]
        total.update(c)
        counted = c["killed"] + c["survived"]
        score = c["killed"] / counted if counted else 1.0
        rows.append(f"| `{mod}` | {sum(c.values())} | {c['equivalent']} | {c['killed']} | {c['survived']} | "
                    f"{score:.1%} |")
    counted = total["killed"] + total["survived"]
    overall = total["killed"] / counted if counted else 1.0
    lines = [
        "# Mutation report of the numerical core",
        "",
        "Written by `python tools/mutation_report.py` after `python tools/mutation_run.py` (see DEVELOPERS.md).",
        "Score = killed / (mutants - equivalent); a mutant no test reaches counts as a survivor.",
        "",
        f"**Overall: {overall:.1%}** ({total['killed']} killed, {total['survived']} survived, "
        f"{total['equivalent']} equivalent, {sum(total.values())} mutants)",
        "",
        "| module | mutants | equivalent | killed | survived | score |",
        "|---|---|---|---|---|---|",
        *rows,
        "",
    ]
    if contradicted:
        lines += ["Listed as equivalent but killed by a test (the entry is wrong, or its number now names another "
                  "mutant; re-check it):", ""]
        lines += [f"- `{n}`" for n in contradicted] + [""]
    if stale_groups:
        lines += ["Saved groups whose files changed since their run (re-run them): "
                  + ", ".join(sorted(stale_groups)), ""]
    if stale:
        lines += ["Equivalent entries with no such mutant now (the function changed; re-check them):", ""]
        lines += [f"- `{n}`" for n in stale] + [""]
    lines += ["## Survivors", ""]
    for mod in sorted(survivors):
        lines += [f"### `{mod}`", ""]
        for name, status, group in survivors[mod]:
            lines.append(f"- `{name}` ({status})")
            if not args.no_diffs:
                lines += ["", "```diff", diff_of(name, group), "```", ""]
        lines.append("")
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text("\n".join(lines), encoding="utf-8")
    print(f"mutation score {overall:.1%} ({total['killed']}/{counted}); report written to {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
