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
    from perierr.units import AU_PER_PC  # from astropy (IAU pc in au)

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


def test_readme_radial_velocity_share_is_computed_independently():
    # The demo star's radial velocity is uncorrelated with its astrometry, so its Shapley share of Var(d_ph)
    # is exactly J_rv^2 sigma_rv^2 / Var(d_ph) (Owen & Prieur 2017, SIAM/ASA JUQ 5, 986). J comes here from
    # central differences of straight-line motion computed with astropy SkyCoord (not perierr's frames), and
    # Var = J Sigma J^T over the six inputs of the demo star file as written (catalogue units converted here).
    import astropy.coordinates as coord
    import astropy.units as u
    import tomllib

    from perierr.demo import demo_path

    s = tomllib.loads(Path(demo_path("kestrel-4.toml")).read_text(encoding="utf-8"))
    names = ("ra", "dec", "parallax", "pmra", "pmdec", "radial_velocity")
    x0 = np.array([s[n] for n in names], dtype=float)

    def d_ph(x):
        c = coord.SkyCoord(
            ra=x[0] * u.deg, dec=x[1] * u.deg, distance=(1000.0 / x[2]) * u.pc, pm_ra_cosdec=x[3] * u.mas / u.yr,
            pm_dec=x[4] * u.mas / u.yr, radial_velocity=x[5] * u.km / u.s, frame="icrs",
        )
        r = c.cartesian.xyz.to_value(u.pc)
        v = c.velocity.d_xyz.to_value(u.km / u.s)
        t = -np.dot(r, v) / np.dot(v, v)
        return float(np.linalg.norm(r + v * t))

    # catalogue errors: ra_error, dec_error in mas of alpha* and delta -> deg of alpha, delta
    mas = 1 / 3.6e6
    sig = np.array([
        s["ra_error"] * mas / np.cos(np.radians(s["dec"])), s["dec_error"] * mas, s["parallax_error"],
        s["pmra_error"], s["pmdec_error"], s["radial_velocity_error"],
    ])
    corr = np.eye(6)
    for i, a in enumerate(names[:5]):
        for j, b in enumerate(names[:5]):
            if i < j:
                corr[i, j] = corr[j, i] = s.get(f"{a}_{b}_corr", 0.0)
    cov = corr * np.outer(sig, sig)
    jac = np.zeros(6)
    for k in range(6):
        h = np.zeros(6)
        h[k] = 1e-3 * sig[k]
        jac[k] = (d_ph(x0 + h) - d_ph(x0 - h)) / (2 * h[k])
    want = jac[5] ** 2 * sig[5] ** 2 / (jac @ cov @ jac)
    row = re.search(r"^  radial_velocity\s+(\d+\.\d)%", README.read_text(encoding="utf-8"), flags=re.M)
    # the README prints one decimal of a percentage: agreement to half a unit of it
    assert abs(float(row.group(1)) / 100 - want) <= 0.0005 + 1e-9, (row.group(1), want)
