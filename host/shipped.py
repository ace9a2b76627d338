"""The demo plant's configs (the invented Kestrel Bay mill) as shipped with dcrig.

Owns: finding a shipped config by its name relative to the configs folder,
`shipped_config("machines/kestrel_f3_stand.toml") -> Path`, through importlib.resources, so a
checkout, an editable install and an installed wheel all find the same files.

Where the files live: once, in the checkout's top-level `configs/` folder. `host/_configs` is
a relative symlink to it, so the files are package data of `host` without a second copy in
git: the wheel build copies them in through the symlink (pyproject's package-data), and a
checkout or editable install reads them through it.
Must never import numba, rtmodel, serial or host.link.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path, PurePosixPath

from host.errors import ConfigError

DATA_DIR = "_configs"  # under the host package
FOLDERS = ("machines", "converters", "controllers", "scenarios", "suites", "campaigns", "records", "replay")


def _traversable(rel: str):
    root = resources.files("host").joinpath(DATA_DIR)
    parts = PurePosixPath(rel).parts if rel else ()
    if any(p in ("..", "") for p in parts) or PurePosixPath(rel).is_absolute():
        raise ConfigError(f"{rel}: (shipped config): must be a name inside the shipped configs, "
                          f"e.g. machines/kestrel_f3_stand.toml, got {rel!r}")
    return root.joinpath(*parts) if parts else root


def shipped_config(rel: str) -> Path:
    """Path of one shipped config, rel like "machines/kestrel_f3_stand.toml".

    Raises ConfigError naming the file when it is not shipped."""
    if not isinstance(rel, str) or not rel.strip():
        raise ConfigError(f"{rel!r}: (shipped config): must name a file, e.g. machines/kestrel_f3_stand.toml")
    res = _traversable(rel.strip())
    if not res.is_file():
        raise ConfigError(f"{rel}: (shipped config): not found among the shipped configs "
                          f"({', '.join(f + '/' for f in FOLDERS)} of the Kestrel Bay demo plant)")
    return _as_path(res, rel)


def shipped_dir(folder: str = "") -> Path:
    """The folder of shipped configs ("machines", "converters", "controllers", or "" for the
    top), for listing them. Raises ConfigError when it is not shipped."""
    res = _traversable(folder)
    if not res.is_dir():
        raise ConfigError(f"{folder or '.'}: (shipped configs): folder not found "
                          f"(shipped: {', '.join(FOLDERS)})")
    return _as_path(res, folder)


def _as_path(res, rel: str) -> Path:
    # pip installs unpacked, so importlib.resources gives real paths; a zipped install would
    # need the files copied out, which dcrig does not do
    if not isinstance(res, Path):
        raise ConfigError(f"{rel}: (shipped config): dcrig is installed zipped; install it unpacked (pip does)")
    return res.resolve()  # in a checkout: the file in configs/, not the path through the symlink
