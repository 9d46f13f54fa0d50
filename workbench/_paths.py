"""Where the workbench finds its data files and notebooks, in a checkout and in an installed copy.

The data live in the repository's top-level ``data/`` folder. A wheel built from ``pyproject.toml`` ships that
folder inside the package as ``workbench/data/`` (``[tool.setuptools.package-dir]`` maps the package
``workbench.data`` onto ``data/``), so an installed copy finds it next to this file. A checkout (or an
editable install) has no ``workbench/data/`` and uses ``data/`` beside the package instead.

The lookup starts from this file's location. For a package installed as plain files (the only way this one
is installed) that is the same real directory :func:`importlib.resources.files` would give, and it also covers
a checkout that is not installed at all; the loaders need a real directory on disk (csv, pandas).
"""

from __future__ import annotations

from pathlib import Path

__all__ = ["data_dir", "notebooks_dir", "repo_root"]

_PACKAGE_DIR = Path(__file__).resolve().parent


def repo_root() -> Path | None:
    """The checkout's top-level folder, or ``None`` when the package runs from an installed copy."""
    candidate = _PACKAGE_DIR.parent
    return candidate if (candidate / "pyproject.toml").is_file() else None


def data_dir() -> Path:
    """Folder holding the data files (``thermo/``, ``limits/``, ``reagents/``, ``demo/``, ``references.csv``).

    Returns
    -------
    pathlib.Path
        ``<site-packages>/workbench/data`` for an installed copy, ``<checkout>/data`` otherwise.

    Raises
    ------
    FileNotFoundError
        If neither location exists (a broken install).
    """
    installed = _PACKAGE_DIR / "data"
    if installed.is_dir():
        return installed
    root = repo_root()
    if root is not None and (root / "data").is_dir():
        return root / "data"
    raise FileNotFoundError(
        f"workbench data folder not found: looked for {installed} (installed copy) and for data/ in a "
        f"checkout beside {_PACKAGE_DIR}; reinstall the package or run from a full checkout"
    )


def notebooks_dir() -> Path:
    """The checkout's ``notebooks/`` folder (notebooks are not installed with the package).

    Raises
    ------
    FileNotFoundError
        If the package does not run from a checkout that has a ``notebooks/`` folder.
    """
    root = repo_root()
    if root is None or not (root / "notebooks").is_dir():
        raise FileNotFoundError(
            f"notebooks/ folder not found beside {_PACKAGE_DIR}: the notebooks ship with the repository, "
            "not with an installed package; run from a checkout"
        )
    return root / "notebooks"
