"""Harmonics at the bus: the current spectrum, the frequency scan and the capacitor's duty.

Per-phase model at the bus where the bank connects (common practice in harmonic studies; the
model as written here is from memory). V is the bus voltage line to line, S_sc the
short-circuit power at the bus, reactances at the fundamental::

    supply      X_s = V² / S_sc                       Z_s(h) = j·h·X_s   (resistance neglected)
    capacitor   X_c' = U_r² / Q_r                     (its own reactance: rated U_r and Q_r)
    branch      Z_b(h) = j·(h·p·X_c' − X_c'/h)        (p the series-reactor share; 0 plain)
    load        R = V² / P                             (damping; P of the load state studied)
    bus         Z_bus(h) = 1 / (1/Z_s(h) + 1/Z_b(h) + 1/R)   (without a bank: no branch)

X_c' from the rating makes the branch give its stated kvar at V: at h = 1 the branch reactance
is X_c'(1 − p), so Q_eff = V² / (X_c'(1 − p)) = Q_r (V/U_r)² / (1 − p), the effective output
of :func:`auditor.correction.banks.output_factor`.

Harmonic voltage at the bus, per order, in percent of the nominal phase voltage V/√3:
V_h = I_h·|Z_bus(h)| from the site's own injected current I_h, plus V_bg,h·|Z_bus(h)/Z_s(h)|
from a background distortion V_bg,h of the supply (a source behind Z_s); the two are added as
magnitudes because their phase angles are not measured (conservative). THD_V = √(Σ_{h≥2} V_h²).

Capacitor duty: branch current I_c,h = V_h / |Z_b(h)|, capacitor voltage V_c,h = I_c,h·X_c'/h;
with the fundamental V_c,1 = (V/√3)(1 + ΔU)/(1 − p) (light-load rise ΔU, reactor):
rms voltage √Σ V_c,h², peak voltage Σ V_c,h (arithmetic: conservative), rms current
√Σ I_c,h², kvar = rms V × rms I, each in percent of the rating.

References
----------
.. [1] IEEE Std 1036-2010: parallel resonance h_r = √(S_sc / Q_c).
.. [2] IEEE Std 519-2014, Table 1: voltage distortion limits at the point of common coupling.
.. [3] IEEE Std 18: capacitor continuous limits — 110 % rms voltage, 120 % peak voltage
   (harmonics included), 135 % rms current, 135 % kvar (as quoted in the project's notes on
   the trade).
.. [4] IEEE Std 1531 (harmonic filter application): detuned branch, tuning order 1/√p.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from auditor.errors import UsageError

SQRT3 = math.sqrt(3.0)
#: The orders of the frequency scan chart: 1 to 50 in steps of 0.1.
SCAN_STEP = 0.1
SCAN_MAX_ORDER = 50
#: Highest harmonic order a spectrum may carry.
MAX_ORDER = 50
#: Six-pulse drives: characteristic orders 6k ± 1 with an idealised current of 1/h of the
#: drive's fundamental current (a ceiling; drives with chokes draw less — from memory).
SIX_PULSE_MAX_ORDER = 49


def scan_grid(step: float = SCAN_STEP, max_order: float = SCAN_MAX_ORDER) -> np.ndarray:
    """Orders 1 … max_order in steps of ``step`` (the frequency scan's x axis)."""
    n = int(round((max_order - 1.0) / step)) + 1
    return np.round(1.0 + step * np.arange(n), 6)


def ieee519_voltage_limits(bus_voltage_v: float | None) -> tuple[float, float]:
    """(individual %, THD %) voltage distortion limits at the bus, IEEE Std 519-2014 Table 1.

    Bus ≤ 1 kV: 5 % and 8 %; 1 kV < bus ≤ 69 kV: 3 % and 5 % (as quoted in the project's notes
    on the trade); 69–161 kV: 1.5 % and 2.5 %; above 161 kV: 1 % and 1.5 % (from memory).
    Unknown voltage: the low-voltage row.
    """
    if bus_voltage_v is None or bus_voltage_v <= 1000.0:
        return 5.0, 8.0
    if bus_voltage_v <= 69_000.0:
        return 3.0, 5.0
    if bus_voltage_v <= 161_000.0:
        return 1.5, 2.5
    return 1.0, 1.5


# --------------------------------------------------------------------------------------------
# the spectrum
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Spectrum:
    """Harmonic currents the site injects at the bus (per phase) and any background voltage.

    Attributes
    ----------
    orders : tuple of int
        Harmonic orders 2 … 50, ascending, unique.
    current_a : tuple of float
        Injected current per order, A rms.
    background_voltage_pct : tuple of float
        Background voltage distortion of the supply per order, % of the nominal phase voltage
        (0 where the file gave none).
    current_pct : tuple of float
        The same currents in percent of ``fundamental_a`` (for display).
    source : {"measured", "estimated"}
    fundamental_a : float
        Fundamental current at the measurement (or of the estimate's load state), A.
    load_kw : float or None
        Active power at the measurement, kW: the load that damps the scan (None: the caller
        uses the site's median load).
    note : str
        Where it came from: a file name, or the estimate's assumptions.
    """

    orders: tuple[int, ...]
    current_a: tuple[float, ...]
    background_voltage_pct: tuple[float, ...]
    current_pct: tuple[float, ...]
    source: str
    fundamental_a: float
    load_kw: float | None = None
    note: str = ""

    def __post_init__(self) -> None:
        if self.source not in ("measured", "estimated"):
            raise UsageError(f"a spectrum is 'measured' or 'estimated', got {self.source!r}")
        n = len(self.orders)
        if not (len(self.current_a) == len(self.background_voltage_pct) == len(self.current_pct) == n):
            raise UsageError("a spectrum needs one current and one background voltage per order")

    @property
    def estimated(self) -> bool:
        return self.source == "estimated"

    def present_orders(self, presence_percent: float) -> tuple[int, ...]:
        """Orders whose current reaches ``presence_percent`` of the fundamental, or whose
        background voltage reaches half that (in percent of the phase voltage)."""
        return tuple(int(h) for h, i, v in zip(self.orders, self.current_pct,
                                                 self.background_voltage_pct, strict=True)
                     if i >= presence_percent or v >= presence_percent / 2.0)

    def to_dict(self) -> dict:
        return {"source": self.source, "orders": list(self.orders), "current_a": list(self.current_a),
                "current_pct": list(self.current_pct),
                "background_voltage_pct": list(self.background_voltage_pct),
                "fundamental_a": self.fundamental_a, "load_kw": self.load_kw, "note": self.note}

    @classmethod
    def from_dict(cls, d: dict) -> Spectrum:
        try:
            return cls(orders=tuple(int(h) for h in d["orders"]),
                       current_a=tuple(float(x) for x in d["current_a"]),
                       background_voltage_pct=tuple(float(x) for x in d["background_voltage_pct"]),
                       current_pct=tuple(float(x) for x in d["current_pct"]),
                       source=str(d["source"]), fundamental_a=float(d["fundamental_a"]),
                       load_kw=None if d.get("load_kw") is None else float(d["load_kw"]),
                       note=str(d.get("note") or ""))
        except (KeyError, TypeError, ValueError) as exc:
            raise UsageError(f"a stored harmonic spectrum is incomplete or damaged ({exc})") from None


def fundamental_current_a(kw: float, pf: float, voltage_v: float) -> float:
    """I_1 = P / (√3 · V · PF), three-phase, A (IEEE Std 1459-2010, sinusoidal case)."""
    if not (kw > 0 and 0 < pf <= 1 and voltage_v > 0):
        raise UsageError(f"the fundamental current needs kW > 0, 0 < PF ≤ 1 and a bus voltage > 0; "
                         f"got kW {kw!r}, PF {pf!r}, V {voltage_v!r}")
    return float(kw * 1000.0 / (SQRT3 * voltage_v * pf))


def spectrum_from_table(orders: Sequence[int], *, voltage_v: float,
                        current_pct: Sequence[float] | None = None,
                        current_a: Sequence[float] | None = None,
                        background_voltage_pct: Sequence[float] | None = None,
                        fundamental_a: float | None = None, kw: float | None = None,
                        pf: float | None = None, note: str = "") -> Spectrum:
    """A measured spectrum from its table: currents in percent of the fundamental (then the
    fundamental current, or the kW and PF at the measurement, are needed) or in amperes.

    An order-1 row gives the fundamental: its ``current_a``, or 100 in ``current_pct``.
    """
    orders = [int(h) for h in orders]
    if fundamental_a is None and kw is not None and pf is not None:
        fundamental_a = fundamental_current_a(kw, pf, voltage_v)
    if current_a is not None:
        amps = [float(x) for x in current_a]
        if 1 in orders:
            fundamental_a = amps[orders.index(1)]
        if fundamental_a is None or not fundamental_a > 0:
            raise UsageError("a spectrum in amperes needs the fundamental current (an order-1 row, "
                             "or the fundamental current / the kW and PF at the measurement) to "
                             "show the currents in percent")
        pct = [100.0 * a / fundamental_a for a in amps]
    elif current_pct is not None:
        pct = [float(x) for x in current_pct]
        if fundamental_a is None or not fundamental_a > 0:
            raise UsageError("a spectrum in percent needs the fundamental current at the measurement, "
                             "or the kW and PF at the measurement")
        amps = [fundamental_a * x / 100.0 for x in pct]
    else:
        raise UsageError("a spectrum needs current_pct or current_a per order")
    background = [float(x) for x in (background_voltage_pct or [0.0] * len(orders))]
    keep = [k for k, h in enumerate(orders) if h >= 2]
    order_sorted = sorted(keep, key=lambda k: orders[k])
    return Spectrum(orders=tuple(orders[k] for k in order_sorted),
                    current_a=tuple(amps[k] for k in order_sorted),
                    background_voltage_pct=tuple(background[k] for k in order_sorted),
                    current_pct=tuple(pct[k] for k in order_sorted), source="measured",
                    fundamental_a=float(fundamental_a), load_kw=None if kw is None else float(kw),
                    note=note)


def estimate_spectrum(drive_share: float, *, load_kw: float, pf: float, voltage_v: float,
                      max_order: int = SIX_PULSE_MAX_ORDER) -> Spectrum:
    """An estimate when nothing was measured: ``drive_share`` of the load is six-pulse drives.

    I_h = share · I_1 / h for h = 6k ± 1 up to ``max_order``, I_1 the site's fundamental
    current at ``load_kw`` and ``pf`` — the idealised characteristic of a six-pulse rectifier,
    a ceiling (real drives with chokes draw less; from memory). Labelled "estimated" wherever
    it is shown.
    """
    share = float(drive_share)
    if not math.isfinite(share) or not 0.0 < share <= 1.0:
        raise UsageError(f"drive share is the fraction of the load on six-pulse drives, "
                         f"greater than 0 and at most 1 (e.g. 0.4); got {drive_share!r}")
    i1 = fundamental_current_a(load_kw, pf, voltage_v)
    orders = [h for k in range(1, max_order // 6 + 2) for h in (6 * k - 1, 6 * k + 1) if h <= max_order]
    pct = [100.0 * share / h for h in orders]
    return Spectrum(orders=tuple(orders), current_a=tuple(i1 * p / 100.0 for p in pct),
                    background_voltage_pct=(0.0,) * len(orders), current_pct=tuple(pct),
                    source="estimated", fundamental_a=i1, load_kw=float(load_kw),
                    note=(f"estimate: {share:.0%} of the load on six-pulse drives, currents 1/h of "
                          f"their fundamental at {load_kw:,.0f} kW (a ceiling, not a measurement)"))


# --------------------------------------------------------------------------------------------
# impedances
# --------------------------------------------------------------------------------------------
def supply_reactance_ohm(voltage_v: float, short_circuit_kva: float) -> float:
    """X_s = V² / S_sc, ohm per phase."""
    return float(voltage_v) ** 2 / (float(short_circuit_kva) * 1000.0)


def capacitor_reactance_ohm(rated_kvar, rated_voltage_v: float):
    """X_c' = U_r² / Q_r, ohm per phase (star equivalent), for one or many ratings."""
    q = np.asarray(rated_kvar, dtype=float)
    return float(rated_voltage_v) ** 2 / (q * 1000.0)


def branch_impedance(orders, xc_ohm, detuning_percent: float = 0.0) -> np.ndarray:
    """Z_b(h) = j (h p X_c' − X_c'/h), shape (branches, orders)."""
    h = np.asarray(orders, dtype=float)[None, :]
    xc = np.atleast_1d(np.asarray(xc_ohm, dtype=float))[:, None]
    p = float(detuning_percent) / 100.0
    return 1j * (h * p * xc - xc / h)


def bus_impedance(orders, *, voltage_v: float, short_circuit_kva: float, xc_ohm=None,
                  detuning_percent: float = 0.0, load_kw: float | None = None) -> np.ndarray:
    """Z_bus(h), complex ohm per phase: shape (orders,) without a bank, (branches, orders) with.

    ``load_kw`` None leaves the scan undamped (no load resistance).
    """
    h = np.asarray(orders, dtype=float)
    y = 1.0 / (1j * h * supply_reactance_ohm(voltage_v, short_circuit_kva))
    if load_kw is not None and load_kw > 0:
        y = y + 1000.0 * float(load_kw) / float(voltage_v) ** 2
    if xc_ohm is None:
        return 1.0 / y
    zb = branch_impedance(h, xc_ohm, detuning_percent)
    with np.errstate(divide="ignore"):
        yb = np.where(zb == 0, np.inf + 0j, 1.0 / np.where(zb == 0, 1.0, zb))
    with np.errstate(invalid="ignore", divide="ignore"):
        z = 1.0 / (y[None, :] + yb)
    return np.where(np.isfinite(yb), z, 0.0 + 0j)


def parallel_resonance_from_scan(orders, z_abs) -> float | None:
    """The order of the highest local peak of |Z_bus| on the scan grid (None without a peak:
    above a detuned bank's resonance |Z| rises with the order again, which is no resonance)."""
    z = np.asarray(z_abs, dtype=float)
    if z.size < 3:
        return None
    inner = (z[1:-1] > z[:-2]) & (z[1:-1] >= z[2:])
    peaks = np.nonzero(inner)[0] + 1
    if peaks.size == 0:
        return None
    return float(np.asarray(orders)[peaks[np.argmax(z[peaks])]])


# --------------------------------------------------------------------------------------------
# a harmonic study of one design
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class HarmonicStudy:
    """Harmonic voltages and capacitor duty of each stage of a design (and of the site alone).

    Arrays are per stage (row) and spectrum order (column); percentages as in the module
    docstring.
    """

    orders: np.ndarray
    current_a: np.ndarray
    v_without_pct: np.ndarray  # (orders,)
    v_with_pct: np.ndarray  # (stages, orders)
    thd_without_pct: float
    thd_with_pct: np.ndarray  # (stages,)
    v_rms_pct: np.ndarray  # capacitor duty per stage
    v_peak_pct: np.ndarray
    i_rms_pct: np.ndarray
    kvar_pct: np.ndarray
    individual_limit_pct: float
    thd_limit_pct: float
    source: str | None
    note: str = ""
    stage_kvar: np.ndarray = field(default_factory=lambda: np.zeros(0))

    def worst_stage(self) -> int:
        """The stage with the highest THD (the largest stage when there is no spectrum)."""
        if self.thd_with_pct.size == 0:
            return -1
        if self.orders.size == 0:
            return int(self.thd_with_pct.size - 1)
        return int(np.argmax(self.thd_with_pct))

    def to_dict(self, stage: int = -1) -> dict:
        """The JSON contract ``harmonics`` for one stage (default the largest)."""
        stage = stage if stage >= 0 else self.thd_with_pct.size - 1
        with_ = self.v_with_pct[stage] if self.v_with_pct.size else np.zeros(self.orders.size)
        return {
            "source": self.source,
            "note": self.note,
            "stage_kvar": float(self.stage_kvar[stage]) if self.stage_kvar.size else None,
            "orders": [{"order": int(h), "current_a": float(i), "bus_voltage_pct_without": float(a),
                        "bus_voltage_pct_with": float(b)}
                       for h, i, a, b in zip(self.orders, self.current_a, self.v_without_pct, with_,
                                             strict=True)],
            "thd_v_pct_without": self.thd_without_pct if self.source else None,
            "thd_v_pct_with": float(self.thd_with_pct[stage]) if self.source else None,
            "limits": {"individual_pct": self.individual_limit_pct, "thd_pct": self.thd_limit_pct},
            "capacitor_duty": {"v_rms_pct": float(self.v_rms_pct[stage]),
                               "v_peak_pct": float(self.v_peak_pct[stage]),
                               "i_rms_pct": float(self.i_rms_pct[stage]),
                               "kvar_pct": float(self.kvar_pct[stage])},
        }


def study(*, voltage_v: float, short_circuit_kva: float, stage_rated_kvar: np.ndarray,
          rated_voltage_v: float, detuning_percent: float, spectrum: Spectrum | None,
          load_kw: float | None, rise_percent: np.ndarray | None = None) -> HarmonicStudy:
    """Harmonic voltages with and without each stage, THD, and each stage's capacitor duty.

    Parameters
    ----------
    voltage_v, short_circuit_kva
        Bus voltage (line to line) and short-circuit power at the bus.
    stage_rated_kvar : numpy.ndarray
        Rated kvar (at ``rated_voltage_v``) of each stage total of the bank, zero excluded.
    rated_voltage_v : float
        Rated voltage of the capacitors (the bus voltage when not given).
    detuning_percent : float
    spectrum : Spectrum or None
        Without a spectrum only the fundamental duty is computed.
    load_kw : float or None
        Damping load; ``spectrum.load_kw`` wins when the spectrum has one.
    rise_percent : numpy.ndarray, optional
        Light-load voltage rise per stage, raising the fundamental across the capacitor.
    """
    stage_rated_kvar = np.atleast_1d(np.asarray(stage_rated_kvar, dtype=float))
    p = float(detuning_percent) / 100.0
    v_phase = float(voltage_v) / SQRT3
    xc = capacitor_reactance_ohm(stage_rated_kvar, rated_voltage_v)
    if spectrum is not None:
        orders = np.asarray(spectrum.orders, dtype=float)
        current = np.asarray(spectrum.current_a, dtype=float)
        background = np.asarray(spectrum.background_voltage_pct, dtype=float) / 100.0 * v_phase
        damping = spectrum.load_kw if spectrum.load_kw is not None else load_kw
    else:
        orders = current = background = np.zeros(0)
        damping = load_kw
    zs = 1j * orders * supply_reactance_ohm(voltage_v, short_circuit_kva)
    z0 = bus_impedance(orders, voltage_v=voltage_v, short_circuit_kva=short_circuit_kva,
                       load_kw=damping)
    zk = bus_impedance(orders, voltage_v=voltage_v, short_circuit_kva=short_circuit_kva, xc_ohm=xc,
                       detuning_percent=detuning_percent, load_kw=damping)
    with np.errstate(invalid="ignore", divide="ignore"):
        v0 = current * np.abs(z0) + background * np.abs(z0 / zs)
        vk = current[None, :] * np.abs(zk) + background[None, :] * np.abs(zk / zs[None, :])
    v0_pct = 100.0 * v0 / v_phase
    vk_pct = 100.0 * vk / v_phase
    # capacitor duty per stage
    rise = np.zeros(stage_rated_kvar.size) if rise_percent is None else np.asarray(rise_percent, dtype=float)
    vc1 = v_phase * (1.0 + rise / 100.0) / (1.0 - p)
    ic1 = vc1 / xc
    zb = np.abs(branch_impedance(orders, xc, detuning_percent))
    with np.errstate(invalid="ignore", divide="ignore"):
        ich = np.where(zb > 0, vk / zb, 0.0)
    vch = ich * xc[:, None] / orders[None, :] if orders.size else np.zeros((xc.size, 0))
    rated_v_phase = float(rated_voltage_v) / SQRT3
    rated_i = stage_rated_kvar * 1000.0 / (SQRT3 * float(rated_voltage_v))
    v_rms = 100.0 * np.sqrt(vc1**2 + np.sum(vch**2, axis=1)) / rated_v_phase
    v_peak = 100.0 * (vc1 + np.sum(vch, axis=1)) / rated_v_phase
    i_rms = 100.0 * np.sqrt(ic1**2 + np.sum(ich**2, axis=1)) / rated_i
    individual, thd = ieee519_voltage_limits(voltage_v)
    return HarmonicStudy(
        orders=orders.astype(int), current_a=current, v_without_pct=v0_pct, v_with_pct=vk_pct,
        thd_without_pct=float(np.sqrt(np.sum(v0_pct**2))), thd_with_pct=np.sqrt(np.sum(vk_pct**2, axis=1)),
        v_rms_pct=v_rms, v_peak_pct=v_peak, i_rms_pct=i_rms, kvar_pct=v_rms * i_rms / 100.0,
        individual_limit_pct=individual, thd_limit_pct=thd,
        source=spectrum.source if spectrum is not None else None,
        note=spectrum.note if spectrum is not None else "", stage_kvar=stage_rated_kvar)


def frequency_scan(*, voltage_v: float, short_circuit_kva: float, stage_rated_kvar: np.ndarray,
                   rated_voltage_v: float, detuning_percent: float, load_kw: float | None,
                   stage_labels: Sequence[str] | None = None, step: float = SCAN_STEP,
                   sign: float = 1.0) -> dict:
    """|Z_bus| against order 1 … 50 without a bank and with each stage (the scan chart's data).

    For an absorbing design (``sign`` < 0: a reactor, or capacitance switched out) only the
    site without it is drawn: a shunt reactor adds no parallel resonance with the supply.
    """
    h = scan_grid(step)
    without = np.abs(bus_impedance(h, voltage_v=voltage_v, short_circuit_kva=short_circuit_kva,
                                   load_kw=load_kw))
    series = []
    if sign > 0 and np.size(stage_rated_kvar):
        q = np.atleast_1d(np.asarray(stage_rated_kvar, dtype=float))
        z = np.abs(bus_impedance(h, voltage_v=voltage_v, short_circuit_kva=short_circuit_kva,
                                 xc_ohm=capacitor_reactance_ohm(q, rated_voltage_v),
                                 detuning_percent=detuning_percent, load_kw=load_kw))
        labels = list(stage_labels) if stage_labels else [f"{x:g} kvar" for x in q]
        for k in range(q.size):
            series.append({"label": labels[k], "rated_kvar": float(q[k]),
                           "resonance_order": parallel_resonance_from_scan(h, z[k]),
                           "impedance_ohm": _sig(z[k])})
    return {"orders": [float(x) for x in h], "impedance_ohm_without": _sig(without),
            "with": series, "load_kw": load_kw, "damped": load_kw is not None}


def _sig(values: np.ndarray, digits: int = 5) -> list[float]:
    """Values rounded to a few significant digits (the chart's JSON stays small)."""
    out = []
    for v in np.asarray(values, dtype=float):
        if not math.isfinite(v) or v == 0:
            out.append(float(v) if math.isfinite(v) else None)
        else:
            out.append(round(float(v), digits - 1 - int(math.floor(math.log10(abs(v))))))
    return out
