"""Type-check the installed packages with mypy: ``.venv/bin/python tests/typecheck.py``.

pyproject maps ``lightwarden.collector`` and its siblings onto top-level folders with
setuptools ``package-dir``. The editable install resolves those names through an import
hook, which mypy does not run, so ``mypy -p lightwarden.collector`` alone finds nothing.
This script lays a tree of symlinks named as installed (``lightwarden/collector`` ->
``collector/``) inside mypy's cache folder, checks every mapped package through it with
the ``[tool.mypy]`` settings, and prints paths as the folders in the work tree. Extra
arguments go to mypy unchanged. Exit status is mypy's.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
TREE = ROOT / ".mypy_cache" / "package-tree"


def package_dirs(pyproject: Path) -> dict[str, str]:
    """Installed package name -> folder, as pyproject's setuptools package-dir says."""
    with pyproject.open("rb") as f:
        config = tomllib.load(f)
    mapping: dict[str, str] = config["tool"]["setuptools"]["package-dir"]
    return mapping


def lay_tree(mapping: dict[str, str]) -> dict[Path, str]:
    """Link each package name to its folder under TREE; return link -> folder."""
    links: dict[Path, str] = {}
    for name, folder in mapping.items():
        link = TREE.joinpath(*name.split("."))
        link.parent.mkdir(parents=True, exist_ok=True)
        target = ROOT / folder
        if link.is_symlink() or link.exists():
            if link.resolve() == target:
                links[link] = folder
                continue
            link.unlink()
        link.symlink_to(target, target_is_directory=True)
        links[link] = folder
    # The installed "lightwarden" is a namespace package, but mypy only trusts a module
    # file below a search-path entry when every folder above it is a package; without
    # this marker it prefers fixtures/lab/maps/ (a data folder) to fixtures/lab/maps.py.
    for name in mapping:
        root = TREE / name.split(".")[0]
        (root / "__init__.pyi").touch()
    return links


def main(argv: list[str]) -> int:
    mapping = package_dirs(ROOT / "pyproject.toml")
    links = lay_tree(mapping)
    packages = [arg for name in sorted(mapping) for arg in ("-p", name)]
    env = dict(os.environ, MYPYPATH=str(TREE))
    proc = subprocess.run(
        [sys.executable, "-m", "mypy", *packages, *argv],
        cwd=ROOT,
        env=env,
        capture_output=True,
        text=True,
        check=False,
    )
    # mypy names files by the path it found them under; the link paths mean nothing to a
    # reader, the folders in the work tree do.
    prefixes = {}
    for link, folder in links.items():
        prefixes[f"{link}{os.sep}"] = f"{folder}{os.sep}"
        prefixes[f"{link.relative_to(ROOT)}{os.sep}"] = f"{folder}{os.sep}"
    for stream, text in ((sys.stdout, proc.stdout), (sys.stderr, proc.stderr)):
        for prefix, folder in prefixes.items():
            text = text.replace(prefix, folder)
        stream.write(text)
    return proc.returncode


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
