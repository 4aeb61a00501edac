"""Public holidays for the tariffs' calendars, from the ``holidays`` library, kept on disk.

The library is the trusted source of public holidays (DEVELOPERS.md, "Dependencies and why"),
but loading it costs a command about a tenth of a second: reading any one country's class
imports every country module of the library. A batch audit or a CLI call that bills under a
tariff with a ``[calendar]`` needs two answers from it — which subdivisions a country has (to
check the tariff) and which days of some years are holidays — and these never change for one
installed version of the library. So the answers are kept in a small JSON file in the user's
cache folder (``AUDITOR_CACHE_DIR``, else the platform's cache folder for the program), named by
the library's installed version; a new version of the library starts a new file. The library
is imported only for an answer the file does not hold yet, and the answer is then added to it.

A file that cannot be read or written (a read-only home, a damaged file, two processes writing
at once) is never an error: the answer comes from the library, as it would without the file.
Writes replace the file whole (a temporary file renamed over it), so a reader never sees half
of one.
"""
from __future__ import annotations

import functools
import json
import os
import threading
from pathlib import Path

import numpy as np

__all__ = ["country_subdivisions", "holiday_days", "library_version"]

_lock = threading.Lock()


@functools.lru_cache(maxsize=1)
def library_version() -> str | None:
    """The installed ``holidays`` version, read from its distribution's folder name beside the
    package (``holidays-0.87.dist-info``) without importing it; None when it cannot be told (then
    nothing is kept on disk)."""
    import importlib.util

    try:
        spec = importlib.util.find_spec("holidays")
    except (ImportError, ValueError):
        return None
    if spec is None or not spec.origin:
        return None
    package = Path(spec.origin).parent
    try:
        found = sorted(p.name for p in package.parent.iterdir()
                       if p.name.startswith("holidays-") and p.name.endswith(".dist-info"))
        stamp = (package / "__init__.py").stat().st_mtime_ns
    except OSError:
        return None
    if len(found) != 1:  # none, or several installs side by side: no telling which one loads
        return None
    return f"{found[0][len('holidays-'):-len('.dist-info')]}-{stamp}"


def _cache_file() -> Path | None:
    version = library_version()
    if version is None:
        return None
    folder = os.environ.get("AUDITOR_CACHE_DIR")
    if not folder:
        import platformdirs

        from auditor import APP_DIR_NAME

        folder = platformdirs.user_cache_dir(APP_DIR_NAME)
    safe = "".join(ch if ch.isalnum() or ch in ".-_" else "_" for ch in version)
    return Path(folder) / f"holidays-{safe}.json"


@functools.lru_cache(maxsize=1)
def _loaded() -> dict:
    """The file's answers, read once per process (empty when there is no usable file)."""
    path = _cache_file()
    if path is None:
        return {"countries": {}, "days": {}}
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        if isinstance(data.get("countries"), dict) and isinstance(data.get("days"), dict):
            return data
    except (OSError, ValueError, AttributeError):
        pass
    return {"countries": {}, "days": {}}


def _remember(section: str, answers: dict) -> None:
    """Add answers to the file (and to this process's copy), in one write; failures are ignored."""
    with _lock:
        data = _loaded()
        data[section].update(answers)
        path = _cache_file()
        if path is None:
            return
        tmp = path.with_name(f".{path.name}.{os.getpid()}.{threading.get_ident()}.tmp")
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            tmp.write_text(json.dumps(data, separators=(",", ":"), sort_keys=True), encoding="utf-8")
            os.replace(tmp, path)
        except OSError:
            try:
                tmp.unlink(missing_ok=True)
            except OSError:
                pass


def country_subdivisions(country: str) -> list[str] | None:
    """The subdivision codes of ``country`` as the library lists them, or None when the library
    does not know the country (its registry of codes, aliases included)."""
    known = _loaded()["countries"]
    if country in known:
        found = known[country]
        return None if found is None else list(found)
    import holidays
    from holidays.registry import EntityLoader

    if country not in set(EntityLoader.get_country_codes()):
        found = None
    else:
        found = [str(s) for s in getattr(holidays, country).subdivisions]
    _remember("countries", {country: found})
    return None if found is None else list(found)


@functools.lru_cache(maxsize=64)
def holiday_days(country: str, subdivision: str | None, years: tuple[int, int]) -> np.ndarray:
    """Public holidays of the years ``years[0]..years[1]`` as days since 1970-01-01 (sorted,
    read-only): the days the library gives for each of those years (a day observed in a
    neighbouring year included, as the library places it)."""
    known = _loaded()["days"]
    wanted = range(int(years[0]), int(years[1]) + 1)
    keys = {y: f"{country}|{subdivision or ''}|{y}" for y in wanted}
    missing = [y for y in wanted if keys[y] not in known]
    if missing:
        import holidays

        _remember("days", {keys[y]: sorted(int(np.datetime64(d, "D").astype(np.int64))
                                           for d in holidays.country_holidays(country, subdiv=subdivision, years=y))
                           for y in missing})
    days = np.unique(np.array([x for y in wanted for x in known[keys[y]]], dtype=np.int64))
    days.flags.writeable = False
    return days
