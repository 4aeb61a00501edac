"""The dashboard's own tariff files: check a tariff's text and keep it, by name, in a folder.

A tariff uploaded or edited in the dashboard goes through the same validation as
``auditor audit --tariff FILE`` (:func:`auditor.tariffs.load_tariff`): a bad one raises the
same :class:`~auditor.errors.TariffError` naming the key path (``reactive[2].tan_phi_limit``)
or the TOML line and column. Messages name the tariff by the name the user gave it, never by a
path on the server. A good one is written to ``<folder>/<name>.toml`` in one step (a temporary
file renamed over the old one), so a reader never sees half a tariff.
"""
from __future__ import annotations

import os
import re
import tempfile
from pathlib import Path

from auditor.errors import TariffError, UsageError
from auditor.tariffs import Tariff, load_tariff

__all__ = ["NAME_PATTERN", "MAX_BYTES", "check_name", "check_tariff_text", "save_tariff", "delete_tariff"]

#: A tariff's name is its file stem: letters, digits, "_" and "-", up to 64 characters.
NAME_PATTERN = re.compile(r"[A-Za-z0-9][A-Za-z0-9_-]{0,63}")
#: A tariff is a few kilobytes; anything much larger is not a tariff.
MAX_BYTES = 256 * 1024


def check_name(name: str) -> str:
    """The name, stripped, or a UsageError saying what a name may hold."""
    name = (name or "").strip()
    if name.lower().endswith(".toml"):
        name = name[:-5]
    if not NAME_PATTERN.fullmatch(name):
        raise UsageError(f"tariff name {name!r}: use 1 to 64 letters, digits, '_' or '-', starting with a "
                         "letter or digit (it becomes the file name)")
    return name


def check_tariff_text(text: str | bytes, shown_name: str) -> Tariff:
    """Validate a tariff's TOML text exactly as a tariff file is validated.

    Raises
    ------
    TariffError
        Naming ``shown_name`` (never a server path), the key path or the TOML position, and
        what is allowed.
    """
    raw = text.encode("utf-8") if isinstance(text, str) else bytes(text)
    if len(raw) > MAX_BYTES:
        raise TariffError("(file)", f"is {len(raw):,} bytes; a tariff file is at most {MAX_BYTES:,}", shown_name)
    with tempfile.TemporaryDirectory(prefix="auditor-tariff-") as folder:
        path = Path(folder) / "tariff.toml"
        path.write_bytes(raw)
        try:
            return load_tariff(path)
        except TariffError as exc:
            raise TariffError(exc.key, exc.detail.replace(str(path), shown_name), shown_name, exc.line) from None


def save_tariff(folder: str | Path, name: str, text: str | bytes) -> tuple[Path, Tariff]:
    """Check ``text`` and keep it as ``folder/<name>.toml`` (replacing a file of that name).

    Returns the file written and the tariff it holds. Nothing is written when the text does not
    validate.
    """
    name = check_name(name)
    tariff = check_tariff_text(text, f"{name}.toml")
    raw = text.encode("utf-8") if isinstance(text, str) else bytes(text)
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    target = folder / f"{name}.toml"
    fd, tmp = tempfile.mkstemp(prefix=f".{name}-", suffix=".part", dir=folder)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(raw)
        os.replace(tmp, target)
    except OSError as exc:
        Path(tmp).unlink(missing_ok=True)
        raise UsageError(f"cannot keep tariff {name!r}: {exc.strerror or exc}") from None
    return target, tariff


def delete_tariff(folder: str | Path, name: str) -> None:
    """Remove ``folder/<name>.toml``; only the dashboard's own tariffs can be removed."""
    name = check_name(name)
    target = Path(folder) / f"{name}.toml"
    if not target.is_file():
        raise UsageError(f"tariff {name!r} is not one of the dashboard's own tariffs; shipped examples and "
                         "tariffs given to the server stay")
    target.unlink()
