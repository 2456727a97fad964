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


def test_readme_demo_excerpt_is_what_the_demo_prints():
    # every line of the README's demo excerpt (except the elisions) appears verbatim in
    # `perierr demo --seed 1`
    import io

    from perierr.cli import main

    text = README.read_text(encoding="utf-8")
    excerpt = re.search(r"`perierr demo --seed 1` prints.*?```\n(.*?)```", text, flags=re.S).group(1)
    out = io.StringIO()
    assert main(["demo", "--seed", "1"], out=out) == 0
    printed = out.getvalue().splitlines()
    lines = [line for line in excerpt.splitlines() if line.strip() and line.strip() != "..."]
    assert len(lines) >= 10
    missing = [line for line in lines if line not in printed]
    assert not missing, missing
