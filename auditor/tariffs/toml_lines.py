"""Where a key sits in a TOML text: the 1-based line of a key path such as
``reactive[2].bands[0].min_pf``, for error messages.

``tomllib`` returns plain dicts without positions, so the text is scanned once, line by line:
table headers (``[a.b]``, ``[[a.b]]`` with their running index), ``key = value`` lines (bare,
quoted and dotted keys), skipping comments, multi-line strings and the inside of multi-line
arrays and inline tables. A path that is not written literally (a key inside an inline table, a
required key that is missing) falls back to the nearest enclosing table or key that is.

The same scan measures how deeply arrays and inline tables nest (:func:`deepest_nesting`), so a
pathological file can be rejected with its line before the TOML parser recurses into it.
"""
from __future__ import annotations

import re

__all__ = ["deepest_nesting", "key_lines", "locate_key"]

_BARE = re.compile(r"[A-Za-z0-9_-]+")
_PATH_PART = re.compile(r"([^.\[\]]+)((?:\[\d+\])*)")


def _split_keys(text: str) -> list[str] | None:
    """``a."b c".d`` -> ["a", "b c", "d"]; None when ``text`` is not a key."""
    out, i, n = [], 0, len(text)
    while i < n:
        while i < n and text[i] in " \t":
            i += 1
        if i >= n:
            return None
        if text[i] in "\"'":
            q = text[i]
            j = text.find(q, i + 1)
            if j < 0:
                return None
            out.append(text[i + 1 : j])
            i = j + 1
        else:
            m = _BARE.match(text, i)
            if not m:
                return None
            out.append(m.group(0))
            i = m.end()
        while i < n and text[i] in " \t":
            i += 1
        if i < n:
            if text[i] != ".":
                return None
            i += 1
    return out or None


class _Scanner:
    """Walks the text once, character by character outside strings (no recursion)."""

    def __init__(self, text: str):
        self.lines = text.splitlines()

    def scan(self):
        """Yield ``(line_number, kind, payload, depth_before)`` with kind ``header``,
        ``array_header`` or ``key``, and ``("depth", max_depth)`` events for nesting."""
        depth = 0
        in_ml: str | None = None  # the delimiter of an open multi-line string
        for no, raw in enumerate(self.lines, start=1):
            line = raw
            start_depth = depth
            if in_ml is None and depth == 0:
                stripped = line.strip()
                if stripped.startswith("[["):
                    end = stripped.find("]]")
                    keys = _split_keys(stripped[2:end]) if end > 0 else None
                    if keys:
                        yield no, "array_header", keys, 0
                    continue
                if stripped.startswith("["):
                    end = stripped.find("]")
                    keys = _split_keys(stripped[1:end]) if end > 0 else None
                    if keys:
                        yield no, "header", keys, 0
                    continue
            # walk the line: strings, comments, brackets
            i, n, key_end = 0, len(line), None
            while i < n:
                c = line[i]
                if in_ml is not None:
                    j = line.find(in_ml, i)
                    if j < 0:
                        i = n
                        break
                    i = j + 3
                    in_ml = None
                    continue
                if c == "#":
                    break
                if line.startswith('"""', i) or line.startswith("'''", i):
                    in_ml = line[i : i + 3]
                    i += 3
                    continue
                if c in "\"'":
                    j = i + 1
                    while j < n and line[j] != c:
                        j += 2 if (c == '"' and line[j] == "\\") else 1
                    i = j + 1
                    continue
                if c == "=" and key_end is None and start_depth == 0 and depth == 0:
                    key_end = i
                elif c in "[{":
                    depth += 1
                    yield no, "depth", depth, start_depth
                elif c in "]}":
                    depth = max(0, depth - 1)
                i += 1
            if key_end is not None and start_depth == 0:
                keys = _split_keys(line[:key_end])
                if keys:
                    yield no, "key", keys, 0


def key_lines(text: str) -> dict[str, int]:
    """Every written key path and table header of ``text`` -> its 1-based line."""
    out: dict[str, int] = {}
    counters: dict[str, int] = {}
    table = ""
    for no, kind, payload, _ in _Scanner(text).scan():
        if kind == "depth":
            continue
        if kind == "key":
            path = table
            for k in payload:
                path = f"{path}.{k}" if path else k
                out.setdefault(path, no)
            continue
        # headers: resolve each part against the current array-of-tables indices
        path = ""
        for k in payload[:-1]:
            path = f"{path}.{k}" if path else k
            if path in counters:
                path = f"{path}[{counters[path]}]"
        last = f"{path}.{payload[-1]}" if path else payload[-1]
        if kind == "array_header":
            counters[last] = counters.get(last, -1) + 1
            table = f"{last}[{counters[last]}]"
        else:
            table = last
        out.setdefault(table, no)
    return out


def locate_key(text: str, key: str) -> int | None:
    """The line of ``key`` (a validator key path) in ``text``, or of its nearest enclosing
    table or key; None for paths that are not keys (``(file)``, ``(top level)``)."""
    if not key or key.startswith("("):
        return None
    lines = key_lines(text)
    path = key
    while path:
        if path in lines:
            return lines[path]
        if path.endswith("]"):
            path = path[: path.rindex("[")]
        elif "." in path:
            path = path[: path.rindex(".")]
        else:
            break
    return None


def deepest_nesting(text: str, limit: int) -> int | None:
    """The first line where arrays and inline tables nest deeper than ``limit``, or None."""
    for no, kind, payload, _ in _Scanner(text).scan():
        if kind == "depth" and payload > limit:
            return no
    return None
