"""The walkthrough notebook runs top to bottom and says what the API says."""

import json
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import perierr  # noqa: E402
from perierr.demo import demo_path  # noqa: E402

NOTEBOOK = Path(__file__).resolve().parent.parent / "notebooks" / "walkthrough.ipynb"


def test_walkthrough_runs_and_matches_the_api():
    cells = json.loads(NOTEBOOK.read_text())["cells"]
    namespace = {}
    for cell in cells:
        if cell["cell_type"] == "code":
            exec(compile("".join(cell["source"]), str(NOTEBOOK), "exec"), namespace)  # noqa: S102
    star = perierr.read_star_file(demo_path("kestrel-4.toml"))
    api = perierr.analyze(star, n_samples=200_000, seed=42)
    want = [t for t in api.monte_carlo.thresholds if t.label == "20000 au"][0].probability
    assert namespace["probability_within_20000_au"] == want
    # normal approximation of the linearized result (scipy.stats.norm): P = Phi((20,000 au - d) / sigma)
    from scipy.stats import norm

    au = api.to_dict()["linearized"]["distance_au"]
    assert abs(want - norm.cdf((20_000 - au["value"]) / au["sigma"])) < 0.01
