"""One place to find a tariff by name: the shipped examples and the ``*.toml`` files of extra
directories, each loaded once per file modification time.

The dashboard lets a browser choose a tariff by name (a file stem, never a path); the CLI takes
a path or the name of a shipped example. Both resolve names here.
"""
from __future__ import annotations

import threading
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path

from auditor.errors import NotFoundError, TariffError
from auditor.tariffs.loader import load_tariff
from auditor.tariffs.model import Tariff

__all__ = ["EXAMPLES_DIR", "TariffChoice", "find_tariff", "load_named_tariff", "tariff_choices"]

EXAMPLES_DIR = Path(__file__).parent / "examples"


@dataclass(frozen=True)
class TariffChoice:
    """A tariff file the dashboard offers: its name (file stem), path and title."""

    name: str
    path: Path
    title: str
    error: str | None = None


def tariff_choices(extra_dirs: Iterable[str | Path] = ()) -> list[TariffChoice]:
    """The shipped example tariffs and the ``*.toml`` files of ``extra_dirs``, by name.

    ``extra_dirs`` holds folders and single tariff files; a later entry overrides an earlier one
    (and any example) of the same name. A file that does not validate is listed with its error
    rather than hidden.
    """
    found: dict[str, Path] = {p.stem: p for p in sorted(EXAMPLES_DIR.glob("*.toml"))}
    for d in extra_dirs:
        d = Path(d)
        if d.is_dir():
            found.update({p.stem: p for p in sorted(d.glob("*.toml"))})
        elif d.is_file():
            found[d.stem] = d
    out = []
    for name, path in sorted(found.items()):
        try:
            out.append(TariffChoice(name, path, _load_cached(path).name))
        except TariffError as exc:
            out.append(TariffChoice(name, path, name, error=exc.message))
    return out


def find_tariff(name: str, extra_dirs: Iterable[str | Path] = ()) -> TariffChoice:
    """The tariff called ``name`` (a file stem, never a path: the browser chooses by name)."""
    for c in tariff_choices(extra_dirs):
        if c.name == name:
            if c.error:
                raise TariffError("-", c.error)
            return c
    known = ", ".join(c.name for c in tariff_choices(extra_dirs))
    raise NotFoundError(f"no tariff {name!r}; known tariffs: {known}")


_tariff_cache: dict[tuple[str, float], Tariff] = {}
_tariff_lock = threading.Lock()


def _load_cached(path: Path) -> Tariff:
    key = (str(path), path.stat().st_mtime)
    with _tariff_lock:
        if key in _tariff_cache:
            return _tariff_cache[key]
    t = load_tariff(path)
    with _tariff_lock:
        _tariff_cache[key] = t
    return t


def load_named_tariff(name: str, extra_dirs: Iterable[str | Path] = ()) -> Tariff:
    """The validated tariff called ``name`` (see :func:`find_tariff`), loaded once per file
    modification time."""
    return _load_cached(find_tariff(name, extra_dirs).path)
