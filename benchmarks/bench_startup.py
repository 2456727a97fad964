"""Start-up time of the ``perierr`` command: importing ``perierr.cli``, and a whole ``perierr run``.

Each command runs in a fresh interpreter (``subprocess``), ``--repeat`` times, interleaved so that load on
a shared machine hits all of them alike; the reference is ``python -c pass`` measured in the same run
(this machine's absolute timings are noisy, read the ratios and the differences). Besides the wall time
each run's CPU time (user + system, from ``resource.getrusage``) is reported: on a busy machine it is
the steadier of the two.

* ``python -c pass``: the interpreter alone;
* ``import perierr.cli``: what every command pays before it starts;
* ``perierr run``: the demo star (invented), 100,000 draws, the default model (the Galactic orbit), the
  default report;
* ``perierr run, 1,000 draws``: the same with almost no computing, so nearly all of it is start-up;
* ``perierr run, straight line``: ``--model straight_line``, 100,000 draws on straight lines (which still
  integrate one orbit at the nominal inputs for the model-difference caution).

With ``--importtime`` it also lists the modules that cost most to import (``python -X importtime``,
cumulative milliseconds, the largest first). ``--compare PATH`` also measures another checkout of perierr
(a folder holding the ``perierr`` package), e.g. an older commit unpacked with
``git archive <commit> perierr | tar -x -C PATH``, interleaved with this one, for a before/after in one run.

Run:  python benchmarks/bench_startup.py [--repeat 7] [--importtime] [--compare PATH]
"""

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # one core

import argparse  # noqa: E402
import resource  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
STAR = ROOT / "data_demo" / "kestrel-4.toml"


def commands() -> dict:
    run = f"import sys; from perierr.cli import main; sys.exit(main(['run', {str(STAR)!r}, '--seed', '1']))"
    small = run.replace("'--seed', '1'", "'--seed', '1', '--samples', '1000'")
    straight = run.replace("'--seed', '1'", "'--seed', '1', '--model', 'straight_line'")
    return {
        "python -c pass": "pass",
        "import perierr.cli": "import perierr.cli",
        "perierr run": run,
        "perierr run, 1,000 draws": small,
        "perierr run, straight line": straight,
    }


def environment(source: Path) -> dict:
    """Environment of the runs: ``source`` first on the path (the runs also start in ``source``: with
    ``-c`` Python puts the working folder first on ``sys.path``)."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(source), env.get("PYTHONPATH", "")]).rstrip(os.pathsep)
    env["MPLBACKEND"] = "Agg"
    return env


def _children_cpu() -> float:
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def wall_time(code: str, env: dict) -> tuple:
    """(wall, CPU) seconds from starting the interpreter to its exit, output discarded."""
    cwd = env["PYTHONPATH"].split(os.pathsep)[0]
    cpu0, t0 = _children_cpu(), time.perf_counter()
    subprocess.run([sys.executable, "-c", code], env=env, check=True, stdout=subprocess.DEVNULL, cwd=cwd)
    return time.perf_counter() - t0, _children_cpu() - cpu0


def measure(repeat: int, envs: dict) -> dict:
    """Wall times ``{source: {command: [seconds]}}``, every command of every source once per round."""
    cmds = commands()
    times = {source: {name: [] for name in cmds} for source in envs}
    for env in envs.values():  # one warm-up each (file system cache, .pyc files)
        for code in cmds.values():
            wall_time(code, env)
    for _ in range(repeat):
        for source, env in envs.items():
            for name, code in cmds.items():
                times[source][name].append(wall_time(code, env))
    return times


def report(source, times: dict) -> None:
    wall = {name: statistics.median(t[0] for t in ts) for name, ts in times.items()}
    cpu = {name: statistics.median(t[1] for t in ts) for name, ts in times.items()}
    base, base_cpu = wall["python -c pass"], cpu["python -c pass"]
    print(f"\nperierr from {source}")
    print(f"{'command':<28}{'wall':>8}{'min':>8}{'- pass':>9}{'/ pass':>8}{'cpu':>9}{'/ pass':>8}")
    for name, ts in times.items():
        low = min(t[0] for t in ts)
        print(f"{name:<28}{wall[name] * 1e3:>6.0f}ms{low * 1e3:>6.0f}ms{(wall[name] - base) * 1e3:>7.0f}ms"
              f"{wall[name] / base:>7.1f}x{cpu[name] * 1e3:>7.0f}ms{cpu[name] / base_cpu:>7.1f}x")
    share = (wall["import perierr.cli"] - base) / (wall["perierr run"] - base)
    print(f"importing is {share:.0%} of a default `perierr run` beyond the interpreter's own start (wall, medians)")


def import_costs(env: dict, top: int) -> list:
    """The ``top`` largest cumulative import times of ``import perierr.cli`` [(microseconds, module)]."""
    cwd = env["PYTHONPATH"].split(os.pathsep)[0]
    code = "import perierr.cli, sys; assert perierr.cli.__file__.startswith(sys.argv[1]), perierr.cli.__file__"
    done = subprocess.run([sys.executable, "-X", "importtime", "-c", code, cwd], env=env, cwd=cwd,
                          capture_output=True, text=True, check=True)
    rows = []
    for line in done.stderr.splitlines():
        parts = line.split("|")
        if len(parts) == 3 and parts[1].strip().isdigit():
            rows.append((int(parts[1]), parts[2].rstrip()))
    return sorted(rows, reverse=True)[:top]


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=7)
    ap.add_argument("--importtime", action="store_true", help="also list the costliest imports")
    ap.add_argument("--compare", type=Path, default=None, help="another folder holding a perierr package")
    args = ap.parse_args()
    sources = [ROOT] + ([args.compare.resolve()] if args.compare is not None else [])
    envs = {source: environment(source) for source in sources}
    print(f"{args.repeat} runs of each command, fresh interpreters, one thread, interleaved")
    times = measure(args.repeat, envs)
    for source in sources:
        report(source, times[source])
        if args.importtime:
            print("costliest imports of `import perierr.cli` (cumulative, python -X importtime):")
            for us, module in import_costs(envs[source], 12):
                print(f"  {us / 1e3:8.1f} ms  {module}")
    print(f"\nReproduce: python {Path(__file__).relative_to(ROOT)} --repeat {args.repeat}"
          + (" --importtime" if args.importtime else "") + (f" --compare {args.compare}" if args.compare else ""))


if __name__ == "__main__":
    main()
