"""Progress of long runs: the terminal line (perierr.progress) and the callable the Monte Carlo hands to the model.

The line's numbers are checked against the arithmetic they claim (rate = draws done since the pass began /
seconds elapsed; time left = draws to go / rate), with a clock the test controls (no timed tests). A fake
terminal is a StringIO whose isatty() is True (io.IOBase.isatty is what terminals answer True to).
"""

import io
import sys
import warnings

import numpy as np
import pytest

from perierr import ObservedStar, analyze
from perierr.cli import main
from perierr.demo import demo_path
from perierr.errors import PerierrWarning
from perierr.models import StraightLine, make_model
from perierr.models.base import ForwardModel, Perihelion
from perierr.progress import MIN_INTERVAL_S, TerminalProgress, format_duration, terminal_progress
from perierr.propagate import monte_carlo


class Terminal(io.StringIO):
    """A fake terminal: what it was sent, and isatty() True."""

    def isatty(self):
        return True


def ticking(times):
    """A clock returning ``times`` in turn."""
    it = iter(times)
    return lambda: next(it)


def passes(text):
    """The states the line showed, in order (each write starts with a carriage return; padding stripped)."""
    return [part.rstrip(" \n") for part in text.split("\r")[1:]]


class Recorder:
    """A progress callable that keeps every (done, total) it was given."""

    def __init__(self):
        self.calls = []

    def __call__(self, done, total):
        self.calls.append((done, total))


def star(**over):
    """An invented well-measured star on a close pass (t_ph ~ 0.65 Myr)."""
    fields = dict(
        name="invented Wren-2", ra=201.37, dec=-27.62, parallax=48.0, parallax_error=0.03,
        pmra=0.71, pmra_error=0.035, pmdec=-1.2, pmdec_error=0.03,
        radial_velocity=-31.2, radial_velocity_error=0.6,
    )  # fmt: skip
    fields.update(over)
    return ObservedStar.from_values(**fields)


# ------------------------------------------------------------------------------------------ the terminal line
def test_the_line_shows_draws_rate_and_time_left_and_is_throttled():
    out = Terminal()
    n = 100_000
    progress = TerminalProgress(out, clock=ticking([0.0, 0.1, 1.0, 1.05, 4.0]))
    progress(0, n)  # t = 0: the pass starts, shown at once
    progress(5_000, n)  # t = 0.1: within MIN_INTERVAL_S of the last line, not shown
    progress(25_000, n)  # t = 1.0: shown
    progress(26_000, n)  # t = 1.05: not shown
    progress(n, n)  # t = 4.0: the end is always shown, and ends the line
    assert MIN_INTERVAL_S == pytest.approx(0.25)  # "a few updates a second"
    rate = 25_000 / 1.0  # draws done since the start / seconds
    left = (n - 25_000) / rate  # 3 s
    assert passes(out.getvalue()) == [
        "perierr: 0 / 100,000 draws (0 %)",
        f"perierr: 25,000 / 100,000 draws (25 %), {rate:,.0f} draws/s, about {left:.0f} s left",
        f"perierr: 100,000 / 100,000 draws (100 %), {n / 4.0:,.0f} draws/s, done in 4 s",
    ]
    assert out.getvalue().endswith("\n") and out.getvalue().count("\n") == 1  # one line, rewritten in place


def test_a_shorter_line_wipes_the_longer_one_before_it():
    out = Terminal()
    progress = TerminalProgress(out, clock=ticking([0.0, 100.0, 200.0]))
    progress(0, 10**6)
    progress(1, 10**6)  # a very slow rate: a long "time left"
    first = out.getvalue().split("\r")[-1]
    progress(10**6, 10**6)
    last = out.getvalue().split("\r")[-1]
    assert len(last.rstrip("\n")) >= len(first)  # padded with spaces to the previous width


def test_a_new_pass_starts_a_new_line_with_its_own_rate():
    # the adaptive Monte Carlo evaluates every draw again in each round: each round is a pass of its own
    out = Terminal()
    progress = TerminalProgress(out, clock=ticking([0.0, 2.0, 10.0, 11.0]))
    progress(0, 1000)
    progress(1000, 1000)
    progress(0, 3000)
    progress(3000, 3000)
    shown = passes(out.getvalue())
    assert shown[1] == "perierr: 1,000 / 1,000 draws (100 %), 500 draws/s, done in 2 s"
    assert shown[3] == "perierr: 3,000 / 3,000 draws (100 %), 3,000 draws/s, done in 1 s"
    assert out.getvalue().count("\n") == 2


@pytest.mark.parametrize("seconds, text", [(0.4, "0 s"), (8.2, "8 s"), (125, "2 min 05 s"), (3840, "1 h 04 min")])
def test_durations_read_as_people_say_them(seconds, text):
    assert format_duration(seconds) == text


def test_nothing_is_written_when_the_stream_is_not_a_terminal():
    out = io.StringIO()  # isatty() is False, as for a file or a pipe
    progress = TerminalProgress(out, clock=ticking([0.0, 1.0]))
    progress(0, 10)
    progress(10, 10)
    assert out.getvalue() == ""
    assert terminal_progress(out) is None  # the command line then passes no callable at all


def test_terminal_progress_is_none_when_quiet_and_writes_to_stderr_by_default(monkeypatch):
    tty = Terminal()
    monkeypatch.setattr(sys, "stderr", tty)
    assert terminal_progress(quiet=True) is None
    progress = terminal_progress()
    assert isinstance(progress, TerminalProgress) and progress.stream is tty


# ------------------------------------------------------------------------- the Monte Carlo and the model
class Chunked(ForwardModel):
    """Test model: the straight line evaluated in chunks of 700 rows, reporting progress after each."""

    name = "chunked_test"

    def evaluate(self, observables, *, reference=None, progress=None):
        x = np.asarray(observables, dtype=float)
        parts = []
        for start in range(0, x.shape[0], 700):
            parts.append(StraightLine().evaluate(x[start : start + 700]).as_array())
            if progress is not None:
                progress(min(start + 700, x.shape[0]), x.shape[0])
        out = np.concatenate(parts)
        return Perihelion(out[:, 0], out[:, 1], out[:, 2], info={"model": self.name})


class WithoutProgress(ForwardModel):
    """Test model written before ``progress`` existed: its evaluate does not take it."""

    name = "old_test"

    def evaluate(self, observables, *, reference=None):
        return StraightLine().evaluate(observables)


def check_calls(calls, total):
    done = [d for d, _ in calls]
    assert calls[0] == (0, total) and calls[-1] == (total, total)
    assert all(t == total for _, t in calls)
    assert all(b >= a for a, b in zip(done, done[1:]))  # never decreasing


@pytest.mark.parametrize(
    "model, n_calls",
    [(StraightLine(), 2), (Chunked(), 1 + 3), (WithoutProgress(), 2),
     (make_model("straight_line", star_mass_msun=0.5, star_mass_error_msun=0.1), 2)],
    ids=["straight", "chunked", "without-progress", "focused"],
)  # fmt: skip
def test_the_monte_carlo_reports_from_zero_to_every_draw(model, n_calls):
    rec = Recorder()
    res = monte_carlo(star(), model, n=2000, seed=3, progress=rec)
    check_calls(rec.calls, 2000)
    assert len(rec.calls) == n_calls  # 0, then the model's own calls (ceil(2000 / 700) = 3 chunks) or one at the end
    # progress only reports: the numbers are those of a run without it
    plain = monte_carlo(star(), model, n=2000, seed=3)
    np.testing.assert_array_equal(res.perihelion.distance_pc, plain.perihelion.distance_pc)


def test_progress_counts_only_the_draws_the_model_evaluates():
    # a parallax of 2 +- 1.5 mas: P(parallax <= 0) = Phi(-4/3) = 9 % of the draws are not evaluated
    rec = Recorder()
    res = monte_carlo(star(parallax=2.0, parallax_error=1.5), Chunked(), n=3000, seed=5, progress=rec)
    assert 0 < res.n_nonpositive_parallax < 3000
    check_calls(rec.calls, res.n_valid)


def test_each_adaptive_round_is_a_pass_that_ends_with_every_draw():
    rec = Recorder()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        res = monte_carlo(star(), StraightLine(), n=1000, seed=2, target_error=0.02, progress=rec)
    rounds = [i for i, (d, _) in enumerate(rec.calls) if d == 0]
    assert len(rounds) == res.convergence["rounds"] > 1
    for start, stop in zip(rounds, rounds[1:] + [len(rec.calls)]):
        total = rec.calls[start][1]
        check_calls(rec.calls[start:stop], total)
    assert rec.calls[-1] == (res.n, res.n)


def test_analyze_with_the_default_model_reports_progress():
    # today's orbit model evaluates without a progress keyword: the batch is reported once, when done
    rec = Recorder()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PerierrWarning)
        a = analyze(star(), n_samples=2000, seed=4, progress=rec)
    assert a.model["name"] == "orbit"
    check_calls(rec.calls, 2000)


# ---------------------------------------------------------------------------------------------- the command
@pytest.mark.parametrize("quiet", [False, True])
def test_the_command_shows_progress_on_a_terminal_unless_quiet(monkeypatch, quiet):
    tty = Terminal()
    monkeypatch.setattr(sys, "stderr", tty)
    out = io.StringIO()
    argv = ["run", str(demo_path("kestrel-4.toml")), "--samples", "2000", "--seed", "1"] + (["--quiet"] * quiet)
    assert main(argv, out=out) == 0
    if quiet:
        assert tty.getvalue() == ""
    else:
        shown = passes(tty.getvalue())
        assert shown[0] == "perierr: 0 / 2,000 draws (0 %)"
        assert shown[-1].startswith("perierr: 2,000 / 2,000 draws (100 %), ")
    assert "perierr: " not in out.getvalue().split("Input")[0]  # stdout carries the report only


def test_the_command_writes_no_progress_when_stderr_is_not_a_terminal(capsys):
    assert main(["run", str(demo_path("kestrel-4.toml")), "--samples", "2000", "--seed", "1"]) == 0
    assert "draws (" not in capsys.readouterr().err
