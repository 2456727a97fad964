"""Mutation testing of perierr's numerical core, one group of modules at a time.

Each group's mutants are tested against the group's own test files (chosen so
that a surviving mutant, which runs every selected test that reaches its
function, costs seconds rather than the whole suite). A group runs with mutmut
in a scratch copy of the repository, ``.mutation/<group>/`` (git-ignored),
with its own ``[tool.mutmut]`` settings; re-running a group re-tests only what
changed. The score counts a mutant as killed only by these tests, so it is a
lower bound of what the whole suite kills.

Run (from the repository root; ``pip install mutmut``)::

    python tools/mutation_run.py            # every group, one after another
    python tools/mutation_run.py budget orbit
    python tools/mutation_run.py --fresh orbit       # forget the last run and re-test every mutant
    python tools/mutation_run.py --survivors priors  # after adding tests: re-test the last run's survivors
    python tools/mutation_report.py         # the score and the survivors

Wall times on the 2-core development machine are in DEVELOPERS.md.
"""

from __future__ import annotations

import argparse
import json
import shutil
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
WORK = ROOT / ".mutation"

#: group -> (modules to mutate, test files that check them, include tests marked slow)
GROUPS = {
    "budget": (
        ["perierr/budget/*"],
        ["tests/budget/test_budget.py", "tests/budget/test_budget_engine.py", "tests/budget/test_budget_inputs.py",
         "tests/budget/test_budget_global.py", "tests/budget/test_budget_edges.py",
         "tests/budget/test_budget_mutation_edges.py"],
        False,
    ),
    "summary": (
        ["perierr/summary.py", "perierr/thresholds.py"],
        ["tests/test_summary_weighted.py", "tests/propagate/test_propagation.py", "tests/test_json_contract.py",
         "tests/test_summary_edges.py", "tests/test_typed_results.py", "tests/test_summary_mutation_edges.py"],
        False,
    ),
    "frames_models": (
        ["perierr/frames.py", "perierr/models/base.py", "perierr/models/straight.py", "perierr/models/focusing.py",
         "perierr/models/diagnostics.py", "perierr/models/__init__.py"],
        ["tests/test_frames.py", "tests/models/test_straight_line.py", "tests/models/test_focusing.py",
         "tests/budget/test_budget_inputs.py", "tests/test_json_contract.py", "tests/models/test_models_edges.py",
         "tests/test_typed_results.py", "tests/models/test_models_mutation_edges.py"],
        False,
    ),
    "propagate": (
        ["perierr/propagate/*", "perierr/sampling/gaussian.py"],
        ["tests/propagate/test_propagation.py", "tests/test_edge_cases.py", "tests/test_json_contract.py",
         "tests/test_cautions.py", "tests/propagate/test_propagate_edges.py", "tests/test_typed_results.py",
         "tests/propagate/test_linear_correlated.py", "tests/propagate/test_propagate_mutation_edges.py",
         "tests/test_seeds.py"],
        False,
    ),
    "orbit": (
        ["perierr/models/orbit/*"],
        ["tests/models/orbit/test_potentials.py", "tests/models/orbit/test_orbit_model.py",
         "tests/models/orbit/test_orbit_transition.py",
         "tests/models/orbit/test_orbit_leaves.py", "tests/models/orbit/test_orbit_search.py",
         "tests/models/orbit/test_orbit_edges.py", "tests/models/orbit/test_orbit_physics_edges.py"],
        False,
    ),
    "priors": (
        ["perierr/priors/*", "perierr/sampling/reweight.py", "perierr/sampling/mcmc.py",
         "perierr/sampling/posterior.py", "perierr/calibration.py"],
        ["tests/priors/test_priors_densities.py", "tests/sampling/test_priors_sampling.py", "tests/test_calibration.py",
         "tests/test_priors_cli.py", "tests/priors/test_priors_edges.py", "tests/priors/test_priors_mutation_edges.py",
         "tests/sampling/test_sampling_mutation_edges.py", "tests/test_calibration_mutation_edges.py"],
        True,
    ),
    "plan_update": (
        ["perierr/plan/update.py"],
        ["tests/plan/test_plan_update.py", "tests/plan/test_plan_goals.py", "tests/plan/test_plan_update_edges.py",
         "tests/test_units_mutation_edges.py"],
        False,
    ),
    "units": (
        ["perierr/units.py"],
        ["tests/test_units.py", "tests/star/test_star.py", "tests/test_frames.py", "tests/plan/test_plan_update.py",
         "tests/plan/test_plan_update_edges.py", "tests/test_calibration.py", "tests/test_units_mutation_edges.py",
         "tests/test_units_declination_edges.py"],
        False,
    ),
}

_COPY = ("perierr", "tests", "data_demo", "notebooks", "benchmarks", "README.md", "setup.py", "LICENSE")


def _toml_list(items) -> str:
    return "[" + ", ".join(f'"{x}"' for x in items) + "]"


def prepare(group: str) -> Path:
    """Lay out (or refresh) the group's scratch copy with its own mutmut settings."""
    sources, tests, slow = GROUPS[group]
    work = WORK / group
    work.mkdir(parents=True, exist_ok=True)
    for name in _COPY:
        src, dst = ROOT / name, work / name
        if src.is_dir():
            shutil.copytree(src, dst, dirs_exist_ok=True, ignore=shutil.ignore_patterns("__pycache__"))
        elif src.exists():
            shutil.copy2(src, dst)
    text = (ROOT / "pyproject.toml").read_text(encoding="utf-8")
    text = text.split("\n[tool.mutmut]")[0]  # the project's own settings describe the whole-suite run
    selection = [t for t in tests if (ROOT / t).exists()] + ([] if slow else ["-m", "not slow"])
    text += (
        "\n[tool.mutmut]\n"
        'source_paths = ["perierr/"]\n'
        f"only_mutate = {_toml_list(sources)}\n"
        'do_not_mutate_patterns = ["raise \\\\w+\\\\(", "warnings\\\\.warn\\\\(", '
        '"^\\\\s*\\\\w+ = np\\\\.asarray\\\\(\\\\w+, dtype=float\\\\)$"]\n'
        f"also_copy = {_toml_list(['data_demo/', 'README.md', 'notebooks/', 'benchmarks/'])}\n"
        'pytest_add_cli_args = ["-p", "no:cacheprovider", "-q"]\n'
        f"pytest_add_cli_args_test_selection = {_toml_list(selection)}\n"
    )
    (work / "pyproject.toml").write_text(text, encoding="utf-8")
    return work


def run(group: str, children: int) -> float:
    """Run mutmut for one group; returns the wall time in seconds."""
    work = prepare(group)
    mutmut = shutil.which("mutmut") or str(Path(sys.executable).with_name("mutmut"))
    start = time.perf_counter()
    with (work / "mutmut.log").open("w", encoding="utf-8") as log:
        subprocess.run([mutmut, "run", "--max-children", str(children)], cwd=work, stdout=log, stderr=log,
                       check=False)
    return time.perf_counter() - start


#: mutmut exit codes of a mutant no test killed (survived; no test reached it).
_SURVIVOR_CODES = (0, 5, 33)


def reset_survivors(group: str) -> int:
    """Mark the survivors of the group's last run as untested, so that the next run tests them again.

    New tests can only kill more mutants: a killed mutant stays killed (mutmut itself re-tests every mutant
    of a function whose source changed). Returns the number of mutants reset.
    """
    count = 0
    for meta in (WORK / group / "mutants").rglob("*.meta"):
        data = json.loads(meta.read_text(encoding="utf-8"))
        codes = data.get("exit_code_by_key", {})
        hit = [k for k, code in codes.items() if code in _SURVIVOR_CODES]
        if hit:
            codes.update(dict.fromkeys(hit))
            meta.write_text(json.dumps(data, indent=4), encoding="utf-8")
            count += len(hit)
    return count


def main(argv=None) -> int:
    """Run the named groups (default: all); returns the exit status."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("groups", nargs="*", help=f"groups to run (default: all): {', '.join(GROUPS)}")
    parser.add_argument("--max-children", type=int, default=2, help="parallel mutants (default 2)")
    parser.add_argument("--fresh", action="store_true",
                        help="forget the groups' last run first (mutmut re-tests a mutant only when its function "
                             "changed, so new tests are credited only by a fresh run)")
    parser.add_argument("--survivors", action="store_true",
                        help="re-test only the survivors of the groups' last run (after adding tests; "
                             "much faster than --fresh, which re-tests every mutant)")
    args = parser.parse_args(argv)
    if args.fresh and args.survivors:
        parser.error("--fresh re-tests every mutant and --survivors only the survivors: choose one")
    unknown = [g for g in args.groups if g not in GROUPS]
    if unknown:
        parser.error(f"unknown group(s) {', '.join(unknown)}; expected some of {', '.join(GROUPS)}")
    for group in args.groups or list(GROUPS):
        if args.fresh:
            shutil.rmtree(WORK / group, ignore_errors=True)
        if args.survivors:
            print(f"{group}: {reset_survivors(group)} survivors to re-test", flush=True)
        seconds = run(group, args.max_children)
        print(f"{group}: {seconds / 60:.1f} min (log: .mutation/{group}/mutmut.log)", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
