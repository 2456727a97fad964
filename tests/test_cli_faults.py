"""The command line's fault boundary: one message, its own exit status, no partial or stale result."""

import io
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from perierr.cli import EXIT_INPUT, EXIT_INTERRUPTED, EXIT_SYSTEM, main
from perierr.demo import demo_path

STAR = str(demo_path("kestrel-4.toml"))


def run_cli(args, capsys):
    out = io.StringIO()
    code = main(args, out=out)
    return code, out.getvalue(), capsys.readouterr().err


def test_json_into_a_missing_folder_is_refused_before_any_work(tmp_path, capsys):
    target = tmp_path / "nowhere" / "r.json"
    start = time.perf_counter()
    code, out, err = run_cli(["run", STAR, "--samples", "1000000", "--json", str(target)], capsys)
    assert code == EXIT_INPUT
    assert "--json" in err and "does not exist" in err and str(target.parent) in err
    assert "Traceback" not in err and out == ""
    # refused before the computation (10^6 draws would take far longer than the check)
    assert time.perf_counter() - start < 0.5


def test_old_result_is_removed_at_the_start_and_the_new_one_written_whole(tmp_path, capsys):
    target = tmp_path / "r.json"
    target.write_text('{"stale": true}\n')
    code, out, err = run_cli(["run", STAR, "--samples", "2000", "--seed", "3", "--json", str(target)], capsys)
    assert code == 0
    assert f"removed the old {target}" in err and "written when the run completes" in err
    doc = json.loads(target.read_text())
    assert "stale" not in doc and doc["monte_carlo"]["n"] == 2000
    assert [p.name for p in tmp_path.iterdir()] == ["r.json"]  # no temporary file left behind


def test_failed_run_leaves_no_stale_result(tmp_path, capsys):
    target = tmp_path / "r.json"
    target.write_text('{"stale": true}\n')
    bad = tmp_path / "bad.toml"
    bad.write_text("ra = 10\ndec = 5\nparallax = 'twelve'\n")
    code, out, err = run_cli(["run", str(bad), "--json", str(target)], capsys)
    assert code == EXIT_INPUT
    assert not target.exists()  # yesterday's result cannot be read as today's
    assert "parallax" in err and "'twelve'" in err


@pytest.mark.parametrize(
    ("args", "code", "words"),
    [
        (["run", "{dir}"], EXIT_INPUT, ["is a folder"]),
        (["run", STAR, "--samples", "100000000000000"], EXIT_INPUT, ["samples", "GiB of memory"]),
        (["run", STAR, "--json", "{dir}"], EXIT_INPUT, ["--json", "is a folder"]),
    ],
)
def test_faults_are_one_line(args, code, words, tmp_path, capsys):
    args = [a.replace("{dir}", str(tmp_path)) for a in args]
    got, out, err = run_cli(args, capsys)
    assert got == code
    assert all(w in err for w in words), err
    assert len(err.strip().splitlines()) <= 2 and "Traceback" not in err


def test_unwritable_folder_is_an_input_error(tmp_path, capsys):
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        if os.access(locked, os.W_OK):  # running as root: permissions do not bind, use an OS error instead
            code, out, err = run_cli(["run", STAR, "--samples", "1000", "--json", "/proc/r.json"], capsys)
            assert code in (EXIT_INPUT, EXIT_SYSTEM) and "/proc" in err and "Traceback" not in err
        else:
            code, out, err = run_cli(["run", STAR, "--json", str(locked / "r.json")], capsys)
            assert code == EXIT_INPUT and "not writable" in err
    finally:
        locked.chmod(0o700)


@pytest.mark.slow
def test_ctrl_c_ends_with_one_line_and_status_130(tmp_path):
    # a long run (orbit model, many draws) interrupted with SIGINT, as Ctrl-C does in a terminal
    target = tmp_path / "r.json"
    target.write_text("{}\n")
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    proc = subprocess.Popen(
        [sys.executable, "-m", "perierr.cli", "run", STAR, "--model", "orbit", "--samples", "3000000",
         "--json", str(target)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env,
    )
    deadline = time.time() + 60
    while target.exists() and time.time() < deadline:  # the old result is removed when the run starts
        time.sleep(0.05)
    time.sleep(1.0)
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == EXIT_INTERRUPTED
    assert "interrupted" in err and "Traceback" not in err and len(err.strip().splitlines()) <= 2
    assert not target.exists() and not any(Path(tmp_path).glob(".r.json*"))


def test_interrupted_screen_shows_what_it_had(monkeypatch, capsys):
    import perierr.screen as screen

    real = screen._screen_row

    def interrupt_at_row_3(i, *args):
        if i == 3:
            raise KeyboardInterrupt
        return real(i, *args)

    monkeypatch.setattr(screen, "_screen_row", interrupt_at_row_3)
    code, out, err = run_cli(["screen", str(demo_path("kestrel_survey.ecsv"))], capsys)
    assert code == EXIT_INTERRUPTED and "interrupted" in err
    assert "Interrupted after 3 rows" in out and "Screening 3 rows" in out
    assert all(f"Kestrel-{k} " in out for k in (1, 2, 3)) and "Kestrel-4" not in out
