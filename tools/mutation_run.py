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
    python tools/mutation_run.py --sample 500 orbit  # test a seeded random sample of the untested mutants
    python tools/mutation_run.py --unsample orbit    # later: test the ones left out of the sample too
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
         "tests/test_typed_results.py", "tests/models/test_models_mutation_edges.py",
         "tests/models/test_models_base_mutation_edges.py", "tests/models/test_focusing_mass_edges.py"],
        False,
    ),
    "propagate": (
        ["perierr/propagate/*", "perierr/sampling/gaussian.py"],
        ["tests/propagate/test_propagation.py", "tests/test_edge_cases.py", "tests/test_json_contract.py",
         "tests/test_cautions.py", "tests/propagate/test_propagate_edges.py", "tests/test_typed_results.py",
         "tests/propagate/test_linear_correlated.py", "tests/propagate/test_propagate_mutation_edges.py",
         "tests/test_seeds.py", "tests/propagate/test_propagate_survivors_edges.py"],
        False,
    ),
    "orbit": (
        ["perierr/models/orbit/*"],
        ["tests/models/orbit/test_potentials.py", "tests/models/orbit/test_orbit_model.py",
         "tests/models/orbit/test_orbit_transition.py",
         "tests/models/orbit/test_orbit_leaves.py", "tests/models/orbit/test_orbit_search.py",
         "tests/models/orbit/test_orbit_edges.py", "tests/models/orbit/test_orbit_physics_edges.py",
         "tests/models/orbit/test_orbit_map_mutation_edges.py",
         "tests/models/orbit/test_orbit_map_parts_mutation_edges.py",
         "tests/models/orbit/test_orbit_numerics_mutation_edges.py",
         "tests/models/orbit/test_orbit_model_mutation_edges.py",
         "tests/models/orbit/test_orbit_sample_mutation_edges.py",
         "tests/models/orbit/test_orbit_sample2_mutation_edges.py"],
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
    "encounter": (
        ["perierr/encounter.py"],
        ["tests/test_encounter.py", "tests/test_encounter_faces.py", "tests/test_encounter_mutation_edges.py"],
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

#: mutmut's exit code "skipped": here, a mutant left out of a random sample (``--sample``); mutmut does not
#: test a mutant that has an exit code, and re-tests it (code reset) when its function changes.
SKIPPED = 34


def _metas(group: str):
    """(path, data) of every mutmut result file of the group."""
    for meta in sorted((WORK / group / "mutants").rglob("*.meta")):
        yield meta, json.loads(meta.read_text(encoding="utf-8"))


def sample_untested(group: str, size: int, seed: int) -> dict:
    """Leave a seeded random sample of ``size`` of the group's untested mutants to test; mark the rest skipped.

    The sample is drawn without replacement, uniformly, from the mutants with no result yet, those left out
    of an earlier sample included (the population); both are recorded in ``.mutation/<group>/sample.json``
    (replacing an earlier record: the earlier sample's mutants are tested, so they join the exactly known
    part) so that the report can estimate the score of the untested remainder from the sample
    (``tools/mutation_report.py``). Mutants already tested keep their results. A sample drawn after tests
    were written for an earlier sample's survivors estimates the suite as it is now; the earlier sample,
    once triaged, would not (its survivors were killed one by one). Returns the record.
    """
    import random

    population = sorted(k for _, data in _metas(group) for k, code in data.get("exit_code_by_key", {}).items()
                        if code is None or code == SKIPPED)
    chosen = set(random.Random(seed).sample(population, min(size, len(population))))
    for meta, data in _metas(group):
        codes = data.get("exit_code_by_key", {})
        untested = [k for k, code in codes.items() if code is None or code == SKIPPED]
        if untested:
            codes.update({k: (None if k in chosen else SKIPPED) for k in untested})
            meta.write_text(json.dumps(data, indent=4), encoding="utf-8")
    record = {"seed": seed, "population": population, "sample": sorted(chosen)}
    (WORK / group / "sample.json").write_text(json.dumps(record, indent=1), encoding="utf-8")
    return record


def unsample(group: str) -> int:
    """Mark the mutants left out of the group's sample as untested again; returns their number."""
    count = 0
    for meta, data in _metas(group):
        codes = data.get("exit_code_by_key", {})
        hit = [k for k, code in codes.items() if code == SKIPPED]
        if hit:
            codes.update(dict.fromkeys(hit))
            meta.write_text(json.dumps(data, indent=4), encoding="utf-8")
            count += len(hit)
    (WORK / group / "sample.json").unlink(missing_ok=True)
    return count


def _equivalent() -> set:
    """Names of the mutants listed as equivalent in ``tests/mutation/equivalent*.toml``."""
    import tomllib

    return {name for path in (ROOT / "tests" / "mutation").glob("equivalent*.toml")
            for name in tomllib.loads(path.read_text(encoding="utf-8")).get("equivalent", {})}


def reset_survivors(group: str) -> int:
    """Mark the survivors of the group's last run as untested, so that the next run tests them again.

    Survivors listed as equivalent are left as they are (no test can kill them).

    New tests can only kill more mutants: a killed mutant stays killed (mutmut itself re-tests every mutant
    of a function whose source changed). Returns the number of mutants reset.
    """
    count = 0
    equivalent = _equivalent()
    for meta, data in _metas(group):
        codes = data.get("exit_code_by_key", {})
        hit = [k for k, code in codes.items() if code in _SURVIVOR_CODES and k not in equivalent]
        if hit:
            codes.update(dict.fromkeys(hit))
            meta.write_text(json.dumps(data, indent=4), encoding="utf-8")
            count += len(hit)
    return count


def keep_verdicts_for_added_tests(group: str) -> bool:
    """Tell mutmut that the group's test selection changed only by added tests, so its verdicts stand.

    mutmut forgets every result when the test selection of its settings changes (it cannot know whether tests
    were removed). Adding tests can only kill more mutants, so after ``prepare`` with a longer list this writes
    the new selection's fingerprint into mutmut's stats file: mutmut then collects coverage for the new tests
    only and keeps the verdicts, and ``--survivors`` re-tests the survivors with the new tests. Returns whether
    a stats file was updated.
    """
    stats = WORK / group / "mutants" / "mutmut-stats.json"
    if not stats.exists():
        return False
    probe = ("import json; from mutmut.configuration import config; "
             "print(json.dumps(config().config_fingerprint()))")
    done = subprocess.run([sys.executable, "-c", probe], cwd=WORK / group, capture_output=True, text=True,
                          check=True)
    data = json.loads(stats.read_text(encoding="utf-8"))
    data["config_fingerprint"] = json.loads(done.stdout)
    stats.write_text(json.dumps(data, indent=4), encoding="utf-8")
    return True


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
    parser.add_argument("--sample", type=int, metavar="N",
                        help="test only a seeded random sample of N of the mutants not tested yet (the report "
                             "estimates the rest from it, with its standard error)")
    parser.add_argument("--seed", type=int, default=20261202, help="seed of --sample (default 20261202)")
    parser.add_argument("--unsample", action="store_true",
                        help="test the mutants a previous --sample left out as well")
    args = parser.parse_args(argv)
    if args.fresh and args.survivors:
        parser.error("--fresh re-tests every mutant and --survivors only the survivors: choose one")
    if args.sample is not None and args.sample < 1:
        parser.error(f"--sample: expected a number of mutants >= 1, got {args.sample}")
    if args.sample is not None and args.unsample:
        parser.error("--sample leaves mutants out and --unsample brings them back: choose one")
    unknown = [g for g in args.groups if g not in GROUPS]
    if unknown:
        parser.error(f"unknown group(s) {', '.join(unknown)}; expected some of {', '.join(GROUPS)}")
    for group in args.groups or list(GROUPS):
        if args.fresh:
            shutil.rmtree(WORK / group, ignore_errors=True)
        if args.survivors:
            prepare(group)
            keep_verdicts_for_added_tests(group)
            print(f"{group}: {reset_survivors(group)} survivors to re-test", flush=True)
        if args.unsample:
            print(f"{group}: {unsample(group)} mutants left out of the sample to test", flush=True)
        if args.sample is not None:
            if not (WORK / group / "mutants").is_dir():
                parser.error(f"--sample {group}: the group has not run yet; run it once (it can be stopped "
                             "after its first mutants) so that its mutants exist")
            prepare(group)
            record = sample_untested(group, args.sample, args.seed)
            print(f"{group}: testing a random sample of {len(record['sample'])} of the "
                  f"{len(record['population'])} untested mutants (seed {args.seed})", flush=True)
        seconds = run(group, args.max_children)
        print(f"{group}: {seconds / 60:.1f} min (log: .mutation/{group}/mutmut.log)", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
