"""Meter ids and scenario names in addresses.

A meter id is whatever its file gave it: "PLANT/7", "Feeder 2 #A", "50%", "Zählpunkt-電",
".spare", "..". A path segment cannot carry all of that: a server decodes "%2F" back into "/"
before routing (so the id would span two segments), and browsers fold "." and ".." segments
and read a backslash as a slash. The ``meter`` converter therefore writes, before the usual
percent-encoding, ``~`` as ``~7E``, ``/`` as ``~2F``, a backslash as ``~5C`` and a leading ``.``
as ``~2E``, and reads any ``~XX`` (two hex digits) back. Ordinary ids ("KQ-MAIN") look the same
as before, and every ``url_for(..., meter=...)`` encodes through it. A saved scenario's name is
free text too ("Bay 3 / 7 % detuned", "..", "50% — Zählpunkt"): the ``scenario`` converter is the
same rule (``/scenarios/<scenario:name>``).
"""
from __future__ import annotations

import re

from werkzeug.routing import BaseConverter

_ESCAPED = re.compile(r"~([0-9A-Fa-f]{2})")


def escape_meter(meter: str) -> str:
    """``meter`` with the characters a path segment cannot hold written as ``~XX``."""
    text = meter.replace("~", "~7E").replace("/", "~2F").replace("\\", "~5C")
    return "~2E" + text[1:] if text.startswith(".") else text


def unescape_meter(segment: str) -> str:
    return _ESCAPED.sub(lambda m: chr(int(m.group(1), 16)), segment)


class MeterIdConverter(BaseConverter):
    """``<meter:meter>``: one path segment holding any meter id (see the module docstring)."""

    regex = "[^/]+?"
    part_isolating = True

    def to_python(self, value: str) -> str:
        return unescape_meter(value)

    def to_url(self, value: str) -> str:
        return super().to_url(escape_meter(str(value)))


class ScenarioNameConverter(MeterIdConverter):
    """``<scenario:name>``: one path segment holding any scenario name (the meter ids' rule)."""


class FormatConverter(BaseConverter):
    """``<ext:fmt>``: a file extension after a meter id ("csv", "xlsx"): letters and digits only,
    so a meter id holding dots ("PLANT.7.csv") keeps them."""

    regex = "[A-Za-z0-9]+"
