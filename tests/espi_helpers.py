"""Builders of ESPI usage feeds for tests (Atom entries linked by href, as a feed server sends)."""
from __future__ import annotations

from collections.abc import Sequence

BASE = "https://usage.example.net/espi/resource"
UP = f"{BASE}/Subscription/4/UsagePoint/UP-1"


def reading_type(n: int, uom: int, flow: int, power: int = 0, interval_s: int | None = 900,
                 accumulation: int | None = 4) -> str:
    extra = "".join([
        f"<accumulationBehaviour>{accumulation}</accumulationBehaviour>" if accumulation is not None else "",
        f"<intervalLength>{interval_s}</intervalLength>" if interval_s is not None else "",
    ])
    return (f'<entry><link rel="self" href="{BASE}/ReadingType/{n}"/><content>'
            f'<ReadingType xmlns="http://naesb.org/espi">{extra}<flowDirection>{flow}</flowDirection>'
            f'<powerOfTenMultiplier>{power}</powerOfTenMultiplier><uom>{uom}</uom></ReadingType>'
            f'</content></entry>\n')


def meter_reading(n: int) -> str:
    return (f'<entry><link rel="self" href="{UP}/MeterReading/{n}"/>'
            f'<link rel="related" href="{BASE}/ReadingType/{n}"/>'
            f'<content><MeterReading xmlns="http://naesb.org/espi"/></content></entry>\n')


def interval_block(n: int, start: int, values: Sequence, duration: int = 900,
                   quality: Sequence | None = None) -> str:
    """One IntervalBlock entry; each IntervalReading on a line of its own."""
    lines = [f'<entry><link rel="up" href="{UP}/MeterReading/{n}/IntervalBlock"/><content>',
             '<IntervalBlock xmlns="http://naesb.org/espi">']
    for i, v in enumerate(values):
        q = f"<ReadingQuality><quality>{quality[i]}</quality></ReadingQuality>" if quality and quality[i] else ""
        lines.append(f"<IntervalReading><timePeriod><duration>{duration}</duration><start>{start + i * duration}"
                     f"</start></timePeriod><value>{v}</value>{q}</IntervalReading>")
    lines.append("</IntervalBlock></content></entry>")
    return "\n".join(lines) + "\n"


def feed(channels: Sequence[tuple[int, int, int, Sequence]], start: int = 1_736_899_200, duration: int = 900,
         title: str = "Quarry Lane pumping", interval_s: int | None = 900) -> str:
    """A feed with one usage point; ``channels`` = [(uom, flowDirection, powerOfTen, values), ...]."""
    parts = ['<?xml version="1.0" encoding="UTF-8"?>\n<feed xmlns="http://www.w3.org/2005/Atom">\n',
             f'<entry><link rel="self" href="{UP}"/><title>{title}</title><content>'
             '<UsagePoint xmlns="http://naesb.org/espi"/></content></entry>\n']
    for n, (uom, flow, power, values) in enumerate(channels, 1):
        parts.append(meter_reading(n))
        parts.append(reading_type(n, uom, flow, power, interval_s))
        parts.append(interval_block(n, start, values, duration))
    parts.append("</feed>\n")
    return "".join(parts)
