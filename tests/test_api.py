"""The public API: what the README teaches exists, the version has one source, and start-up stays lean.

Checks run in fresh interpreters where what is already imported matters (``subprocess``, so the rest of the
test session cannot hide a missing import). No timing here: benchmarks/bench_startup.py measures start-up.
"""

import importlib
import json
import re
import subprocess
import sys
from pathlib import Path

import pytest
import tomllib

import perierr

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text(encoding="utf-8")


def fresh_python(code: str) -> str:
    """Run ``code`` in a new interpreter with this perierr first on the path; return its stdout."""
    done = subprocess.run(
        [sys.executable, "-c", f"import sys; sys.path.insert(0, {str(ROOT)!r})\n{code}"],
        capture_output=True, text=True, timeout=120, cwd=ROOT,
    )
    assert done.returncode == 0, done.stderr
    return done.stdout


def test_version_has_one_source_that_pyproject_repeats():
    # pyproject.toml's [project] version (PEP 621) is static; perierr/_version.py is the source
    from perierr._version import __version__

    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    assert project["version"] == __version__ == perierr.__version__
    assert re.fullmatch(r"\d+\.\d+\.\d+", __version__)


def test_no_module_imports_the_package_for_its_version():
    # the import cycle perierr/__init__ <-> analysis (analysis took __version__ from the package) is gone:
    # no module of perierr imports the package itself
    cyclic = [
        str(path.relative_to(ROOT)) for path in (ROOT / "perierr").rglob("*.py")
        if re.search(r"^from \.+ import", path.read_text(encoding="utf-8"), flags=re.M)
    ]
    assert cyclic == []


README_IMPORTS = re.findall(r"^\s*(from perierr[\w.]* import [\w, ]+)$", README, flags=re.M)


def test_readme_teaches_imports():
    assert len(README_IMPORTS) >= 3


@pytest.mark.parametrize("line", README_IMPORTS)
def test_every_readme_import_line_imports(line):
    namespace = {}
    exec(line, namespace)  # noqa: S102
    names = [n.strip() for n in line.split(" import ", 1)[1].split(",")]
    assert all(namespace.get(n) is not None for n in names)


def test_every_dotted_name_in_the_readme_resolves_after_import_perierr():
    # `perierr.plan.rank_measurements`, `perierr.models.orbit.potentials` ...: after a plain `import perierr`
    # in a fresh interpreter, attribute access alone must reach them (lazy subpackages); a module the README
    # imports by name (`import perierr.cli`) is not meant as an attribute
    dotted = sorted(set(re.findall(r"(?<!import )\bperierr(?:\.[A-Za-z_]\w*)+", README)))
    dotted = [d for d in dotted if not d.endswith((".toml", ".json", ".ecsv"))]
    assert "perierr.plan.rank_measurements" in dotted and "perierr.priors" in dotted
    code = (
        "import functools, json, perierr\n"
        f"names = {dotted!r}\n"
        "bad = []\n"
        "for name in names:\n"
        "    try:\n"
        "        functools.reduce(getattr, name.split('.')[1:], perierr)\n"
        "    except AttributeError as exc:\n"
        "        bad.append(f'{name}: {exc}')\n"
        "print(json.dumps(bad))\n"
    )
    assert json.loads(fresh_python(code)) == []


def test_every_name_in_all_exists():
    for module in ("perierr", "perierr.plan", "perierr.priors", "perierr.budget", "perierr.models",
                   "perierr.models.orbit", "perierr.propagate", "perierr.errors"):
        mod = importlib.import_module(module)
        missing = [name for name in mod.__all__ if not hasattr(mod, name)]
        assert missing == [], f"{module}.__all__ names what it does not have: {missing}"
    assert fresh_python("from perierr import *\nprint(len(dir()))").strip().isdigit()


def test_the_readme_names_are_public():
    # names the README teaches by their bare name are at the top level of perierr
    for name in ("ObservedStar", "analyze", "read_star_file", "read_catalogue", "make_model",
                 "get_solar_parameters", "OrbitModel", "Potential", "global_budget", "rank_measurements",
                 "PhotonLimitedCost", "InputError", "PerierrError"):
        assert name in perierr.__all__


#: What a plain run (no prior, the default orbit model) must not import: the priors' samplers and densities'
#: scipy.stats, focusing, the planner, plotting, emcee. (The orbit model and its scipy.integrate and
#: scipy.special it needs; a straight-line run loads them too, for the orbit at the nominal inputs.)
NOT_FOR_A_RUN = ("scipy.stats", "emcee", "matplotlib", "uncertainties", "perierr.models.focusing", "perierr.plan")


def test_a_plain_run_imports_only_what_it_needs(tmp_path):
    code = (
        "import io, json, sys\n"
        "from perierr.cli import main\n"
        "after_import = sorted(sys.modules)\n"
        "code = main(['run', 'data_demo/kestrel-4.toml', '--samples', '1000', '--seed', '1'], out=io.StringIO())\n"
        "print(json.dumps([code, after_import, sorted(sys.modules)]))\n"
    )
    code, after_import, after_run = json.loads(fresh_python(code))
    assert code == 0
    for name in NOT_FOR_A_RUN:
        assert name not in after_run, f"a plain `perierr run` imported {name}"
    assert "perierr.models.orbit" not in after_import and "perierr.models.orbit" in after_run  # loaded on use
    assert "perierr.sampling.mcmc" not in after_import and "perierr.priors.densities" not in after_import


OPTIONAL = ("matplotlib", "corner", "galpy", "SALib", "hypothesis", "pytest")


def test_every_module_imports_without_the_optional_packages():
    # the doctests (--doctest-modules) import every module of the package: none may need an optional
    # package (pyproject [project.optional-dependencies]) at import time
    # None in sys.modules is how Python marks a module as absent (importlib docs, "The module cache"): import
    # raises ModuleNotFoundError and importlib.util.find_spec returns None, as for a package not installed
    code = (
        "import importlib, json, pkgutil, sys\n"
        f"sys.modules.update(dict.fromkeys({OPTIONAL!r}))\n"
        "import perierr\n"
        "bad = []\n"
        "for info in pkgutil.walk_packages(perierr.__path__, prefix='perierr.'):\n"
        "    try:\n"
        "        importlib.import_module(info.name)\n"
        "    except ImportError as exc:\n"
        "        bad.append(f'{info.name}: {exc}')\n"
        "print(json.dumps(bad))\n"
    )
    assert json.loads(fresh_python(code)) == []
