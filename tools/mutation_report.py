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
#: left out of a random sample (``tools/mutation_run.py --sample``): estimated from the sample, not counted
UNSAMPLED = 34


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
        if (work / "sample.json").exists():
            record = json.loads((work / "sample.json").read_text(encoding="utf-8"))
            data[group]["sample"] = {"seed": record["seed"], "size": len(record["sample"]),
                                     "population": len(record["population"]), "names": record["sample"]}
        saved.append(group)
    out.write_text(json.dumps(data, indent=1, sort_keys=True) + "\n", encoding="utf-8")
    return saved


def read_samples(root: Path, path: Path, live: set) -> dict:
    """Group -> names of the mutants of its random sample (live runs first, then saved groups)."""
    out = {}
    for group in live:
        record = root / ".mutation" / group / "sample.json"
        if record.exists():
            out[group] = set(json.loads(record.read_text(encoding="utf-8"))["sample"])
    if path.exists():
        for group, entry in json.loads(path.read_text(encoding="utf-8")).items():
            if group not in live and "sample" in entry:
                out[group] = set(entry["sample"]["names"])
    return out


def sampled_estimate(tested: Counter, sample: Counter, unsampled: int) -> tuple:
    """Score of a group whose untested remainder is estimated from a uniform random sample.

    ``tested`` counts killed/survived among every tested, non-equivalent mutant (the sample included);
    ``sample`` the same among the sample's mutants only; ``unsampled`` is the number left out. The remainder's
    kill rate p and non-equivalent fraction q are estimated by the sample's; the score is
    (K + U p) / (N + U q), and its standard error is U * SE(p) / (N + U q) with the finite-population
    corrected binomial SE(p) = sqrt(p (1 - p) / n * (P - n) / (P - 1)), P = n + U (a ratio estimator to first
    order; Cochran, Sampling Techniques, ch. 2-3, from memory). Returns (score, standard error).
    """
    n = sample["killed"] + sample["survived"] + sample["equivalent"]
    killed, counted = tested["killed"], tested["killed"] + tested["survived"]
    if n == 0 or unsampled == 0:
        return (killed / counted if counted else 1.0), 0.0
    p = sample["killed"] / n
    q = (sample["killed"] + sample["survived"]) / n
    population = n + unsampled
    se_p = (p * (1 - p) / n * (population - n) / max(population - 1, 1)) ** 0.5
    denominator = counted + unsampled * q
    return (killed + unsampled * p) / denominator, unsampled * se_p / denominator


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
        out.update({name: (code, group) for name, code in entry["exit_codes"].items()})
    return out, stale


def read_equivalent(folder: Path) -> dict:
    """Mutant name -> reason it is equivalent (behaves exactly like the original), from ``equivalent*.toml``."""
    out = {}
    for path in sorted(folder.glob("equivalent*.toml")):
        data = tomllib.loads(path.read_text(encoding="utf-8"))
        out.update({name: entry["reason"] for name, entry in data.get("equivalent", {}).items()})
    return out


def diff_of(name: str, group) -> str:
    """The mutant's diff, as ``mutmut show`` prints it in its group's folder (only the changed lines)."""
    if not isinstance(group, Path):
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
    samples = read_samples(args.root, args.snapshot, live)
    saved, stale_groups = read_snapshot(args.root, args.snapshot, live)
    results.update(saved)
    if not results:
        print("no mutmut results under .mutation/: run `python tools/mutation_run.py` first", file=sys.stderr)
        return 2
    equivalent = read_equivalent(args.equivalent)
    stale = sorted(set(equivalent) - set(results))
    # an entry whose mutant a test kills is wrong (or its number now names another mutant)
    # (a failing test, not a timeout: a time limit of CPU seconds says nothing about behaviour)
    contradicted = sorted(n for n in equivalent if n in results and results[n][0] in (1, 3))
    per = defaultdict(Counter)
    survivors = defaultdict(list)
    by_group = defaultdict(Counter)  # tested mutants of each group
    by_sample = defaultdict(Counter)  # those of its random sample
    for name, (code, group) in sorted(results.items()):
        mod = module_of(name)
        gname = group.name if isinstance(group, Path) else group
        kind = ("unsampled" if code == UNSAMPLED else "equivalent" if name in equivalent
                else "killed" if code in KILLED else "survived")
        by_group[gname][kind] += 1
        if name in samples.get(gname, ()):
            by_sample[gname][kind] += 1
        if code == UNSAMPLED:
            per[mod]["unsampled"] += 1
        elif name in equivalent:
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
                    f"{c['unsampled']} | {score:.1%} |")
    counted = total["killed"] + total["survived"]
    overall = total["killed"] / counted if counted else 1.0
    estimates = []
    for gname in sorted(g for g in by_group if by_group[g]["unsampled"]):
        score, se = sampled_estimate(by_group[gname], by_sample[gname], by_group[gname]["unsampled"])
        n = sum(by_sample[gname].values())
        counted_s = by_sample[gname]["killed"] + by_sample[gname]["survived"]
        bound = ""
        if by_sample[gname]["survived"] == 0 and counted_s:
            # no survivor in the sample: the rule of three bounds the rest's survival rate (Hanley & Lippman-Hand
            # 1983, JAMA 249, 1743; from memory)
            bound = (f"; no survivor among the sample's {counted_s} non-equivalent mutants, so fewer than "
                     f"{3 / counted_s:.1%} of the rest survive (95 %, rule of three)")
        estimates.append(f"- {gname}: {by_group[gname]['unsampled']} mutants not tested, estimated from a seeded "
                         f"random sample of {n}: group score {score:.1%} ± {se:.1%} (one standard error); "
                         f"exact over the tested ones "
                         f"{sampled_estimate(by_group[gname], Counter(), 0)[0]:.1%}{bound}")
    lines = [
        "# Mutation report of the numerical core",
        "",
        "Written by `python tools/mutation_report.py` after `python tools/mutation_run.py` (see DEVELOPERS.md).",
        "Score = killed / (mutants - equivalent); a mutant no test reaches counts as a survivor.",
        "",
        f"**Overall: {overall:.1%}** of the tested mutants ({total['killed']} killed, {total['survived']} "
        f"survived, {total['equivalent']} equivalent, {total['unsampled']} left out of a random sample, "
        f"{sum(total.values())} mutants)",
        "",
        "| module | mutants | equivalent | killed | survived | not sampled | score |",
        "|---|---|---|---|---|---|---|",
        *rows,
        "",
    ]
    if estimates:
        lines += ["Groups tested on a random sample of their remaining mutants (`tools/mutation_run.py --sample`): "
                  "the survivors of the sample are triaged like any other; the score of the untested rest is "
                  "estimated from the sample.", "", *estimates, ""]
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
