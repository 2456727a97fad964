"""The paper notebook runs top to bottom in a Jupyter kernel (nbclient) and says what the API says."""

import re
import warnings
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

import perierr
from perierr.cautions import HAZARD
from perierr.demo import demo_path
from perierr.report import latex_rows

NOTEBOOK = Path(__file__).resolve().parent.parent / "notebooks" / "paper.ipynb"


def _text(cell) -> str:
    return "".join(o.get("text", "") for o in cell.get("outputs", []) if o.get("output_type") == "stream")


@pytest.mark.slow
def test_paper_notebook_runs_and_its_row_is_the_apis(tmp_path):
    nb = nbformat.read(NOTEBOOK, as_version=4)
    # the bound: the whole notebook in under two minutes (a kernel that hangs fails here, not later)
    NotebookClient(nb, timeout=120, kernel_name="python3", resources={"metadata": {"path": str(tmp_path)}}).execute()
    errors = [o for c in nb.cells for o in c.get("outputs", []) if o.get("output_type") == "error"]
    assert not errors, errors
    cells = [c for c in nb.cells if c.cell_type == "code"]
    row = next(_text(c) for c in cells if "latex_rows" in c.source and "print(row_tex)" in c.source)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", perierr.PerierrWarning)
        api = perierr.analyze(perierr.read_star_file(demo_path("kestrel-4.toml")), n_samples=100_000, seed=2026)
    assert row.strip() == latex_rows([api]).strip()
    # the one-page report it wrote: self-contained, with the hazard caution
    printed = next(_text(c) for c in cells if "page_path.stat()" in c.source)
    page = Path(re.match(r"(\S+\.html)", printed).group(1))
    html = page.read_text(encoding="utf-8")
    assert "http://" not in html and "https://" not in html.replace("https://www.w3.org", "")
    assert " ".join(HAZARD.split()[:6]) in " ".join(html.split())
    for name in ("distance", "corner", "separation", "budget"):
        assert (page.parent / f"kestrel-4-{name}.png").stat().st_size > 10_000
