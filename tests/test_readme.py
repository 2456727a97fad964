"""The README's Python examples run as written, in order, and say what the API says."""

import re
import warnings
from pathlib import Path

import numpy as np

README = Path(__file__).resolve().parent.parent / "README.md"


def test_readme_python_blocks_run_in_order():
    blocks = re.findall(r"```python\n(.*?)```", README.read_text(encoding="utf-8"), flags=re.S)
    assert len(blocks) >= 3
    namespace = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for block in blocks:
            exec(compile(block, str(README), "exec"), namespace)  # noqa: S102
    # the first example's star is the demo star rounded: d_ph ~ 18,960 au under straight lines
    d = namespace["d"]
    assert abs(d.median * 206264.806 - 18_960) < 150
    assert np.isclose(sum(namespace["result"].budget.share("distance_pc").values()), 1.0)
