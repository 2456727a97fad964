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
    # the first example's star is the demo star: the MC median of d_ph (10^6 draws, MC error ~1 au)
    # matches the straight-line value at the nominal inputs, 18,956 au, within 10 au
    from perierr._constants import AU_PER_PC  # from astropy (IAU pc in au)

    d = namespace["d"]
    assert abs(d.median * AU_PER_PC - 18_956) < 10
    assert np.isclose(sum(namespace["result"].budget.share("distance_pc").values()), 1.0)
