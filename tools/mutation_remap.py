"""Carry the equivalent-mutant lists across a move of code between modules.

mutmut names a mutant after its module, its function and its number within the
function (``perierr.budget.global_mc.x_conditional_costs__mutmut_31``). When a
function moves to another module with its text unchanged, its mutants are the
same mutants under a new module name; when its text changes, they are not.
This tool compares each listed function's text at an older commit with the
current tree and rewrites the names in ``tests/mutation/equivalent*.toml``:

* same text in the same module: kept;
* same text in another module (found by function name): renamed;
* otherwise: taken out of the list (its number may now name another mutant) and
  kept in ``tests/mutation/to_recheck.toml`` with its reason, for a re-check.

Run (from the repository root)::

    python tools/mutation_remap.py OLD_COMMIT            # show what would change
    python tools/mutation_remap.py OLD_COMMIT --write    # rewrite the TOML files
    python tools/mutation_remap.py OLD_COMMIT --write --only equivalent_budget.toml
"""

from __future__ import annotations

import argparse
import ast
import re
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
NAME = re.compile(r"^(?P<module>[\w.]+)\.x(?:_(?P<func>\w+?)|ǁ(?P<cls>\w+)ǁ(?P<meth>\w+?))__mutmut_(?P<n>\d+)$")


def functions(source: str) -> dict:
    """``(class or None, function name)`` -> its source text, for top-level functions and methods."""
    tree = ast.parse(source)
    out = {}
    for node in tree.body:
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            out[(None, node.name)] = ast.get_source_segment(source, node)
        elif isinstance(node, ast.ClassDef):
            for item in node.body:
                if isinstance(item, (ast.FunctionDef, ast.AsyncFunctionDef)):
                    out[(node.name, item.name)] = ast.get_source_segment(source, item)
    return out


def module_path(module: str) -> str:
    """``perierr.budget.game`` -> ``perierr/budget/game.py``."""
    return module.replace(".", "/") + ".py"


def old_source(commit: str, module: str) -> str | None:
    """The module's text at ``commit`` (None if it did not exist)."""
    done = subprocess.run(["git", "show", f"{commit}:{module_path(module)}"], capture_output=True, text=True,
                          cwd=ROOT, check=False)
    return done.stdout if done.returncode == 0 else None


def current_functions() -> dict:
    """Module name -> its functions, for every module of the package now."""
    out = {}
    for path in sorted((ROOT / "perierr").rglob("*.py")):
        module = ".".join(path.relative_to(ROOT).with_suffix("").parts)
        out[module] = functions(path.read_text(encoding="utf-8"))
    return out


def remap(name: str, commit: str, now: dict, cache: dict) -> tuple:
    """(new name or None, what happened) for one listed mutant."""
    m = NAME.match(name)
    if m is None:
        return None, "not a mutant name"
    module, n = m["module"], m["n"]
    key = (m["cls"], m["meth"]) if m["cls"] else (None, m["func"])
    if module not in cache:
        text = old_source(commit, module)
        cache[module] = functions(text) if text is not None else {}
    before = cache[module].get(key)
    if before is None:
        return None, "function not found at the old commit"
    if now.get(module, {}).get(key) == before:
        return name, "kept"
    moved = [mod for mod, funcs in now.items() if funcs.get(key) == before]
    if len(moved) == 1:
        tail = f"xǁ{key[0]}ǁ{key[1]}" if key[0] else f"x_{key[1]}"
        return f"{moved[0]}.{tail}__mutmut_{n}", f"moved to {moved[0]}"
    return None, "text changed: re-check"


def main(argv=None) -> int:
    """Remap the names in every equivalents file; returns the exit status."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("commit", help="the commit the lists were written against")
    parser.add_argument("--write", action="store_true", help="rewrite the TOML files")
    parser.add_argument("--only", nargs="*", default=None, help="file names to treat (default: every list)")
    args = parser.parse_args(argv)
    now, cache = current_functions(), {}
    recheck = []
    folder = ROOT / "tests" / "mutation"
    for path in sorted(folder.glob("equivalent*.toml")):
        if args.only is not None and path.name not in args.only:
            continue
        text = path.read_text(encoding="utf-8")
        for name in re.findall(r'^\[equivalent\."([^"]+)"\]', text, flags=re.M):
            new, what = remap(name, args.commit, now, cache)
            if new is None:
                block = re.search(rf'^\[equivalent\."{re.escape(name)}"\]\n(?:[^\[\n].*\n)*\n?', text, flags=re.M)
                recheck.append((path.name, name, what, block.group(0) if block else ""))
                if block:
                    text = text.replace(block.group(0), "")
            elif new != name:
                print(f"{path.name}: {name} -> {new}")
                text = text.replace(f'[equivalent."{name}"]', f'[equivalent."{new}"]')
        if args.write:
            path.write_text(text, encoding="utf-8")
    for file, name, what, _ in recheck:
        print(f"{file}: {name}: {what}")
    if args.write and recheck:
        out = folder / "to_recheck.toml"
        head = "" if out.exists() else (
            "# Equivalence entries whose function changed since they were written (tools/mutation_remap.py):\n"
            "# their numbers may now name other mutants, so they no longer count. Re-check each against the\n"
            "# current mutants and move it back to its equivalent_*.toml under its new name, or kill it.\n\n")
        with out.open("a", encoding="utf-8") as fh:
            fh.write(head + "".join(f"# from {file} ({what}; at {args.commit})\n{block.rstrip()}\n\n"
                                    for file, _, what, block in recheck))
    print(f"{len(recheck)} entries to re-check")
    return 0


if __name__ == "__main__":
    sys.exit(main())
