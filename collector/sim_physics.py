"""Battery-bank physics of the simulator: OCV tables, Peukert, acceptance taper, the step loop.

Used only by :mod:`collector.simulated` (and its tests). The model is deliberately
simple and every part of it is stated here, because the analysis layer is later
tested against what this model did (the "truth" file):

* **State of charge** is coulomb-counted against the TRUE capacity ``capacity_Ah``
  (the capacity from full to empty at the rated ``rated_hours`` discharge rate).
  Charge is multiplied by the charge (Ah) efficiency ``charge_efficiency``;
  discharge current is Peukert-corrected (docs/peukert.md#corrected-current, common practice)::

      I_eff = |I| * (|I| / I_H) ** (k - 1),   I_H = capacity_Ah / rated_hours,
      clamped so that I_eff >= |I| (real capacity saturates below I_H).

  so that a constant-current discharge from full lasts ``t = H (C/(I H))**k``
  hours (Peukert 1897) whenever ``I >= I_H``.
* **Charge acceptance**: bulk (constant current: the bank takes what the sources
  give, up to ``max_charge_C`` x C) until ``soc_cv``; then absorption (constant
  voltage) where the current the bank accepts tapers to the tail current at full::

      I_acc(SoC) = I_tail + (I_max - I_tail) * ((1 - SoC) / (1 - soc_cv)) ** taper_exponent

  At full the chargers drop to float: the bank takes only ``float_current_A``
  (losses, SoC stays at 100 %) and, after a discharge, at most the tail current
  until SoC falls below ``rebulk_soc`` when a new bulk stage starts. The sources
  are throttled in proportion to what they could give ("saturation").
* **Terminal voltage** = OCV(SoC, T) + I * R_internal + V_pol, where V_pol is one
  RC relaxation branch (``polarisation_ohm``, ``relaxation_s``), plus a charging
  knee that brings the voltage up to the absorption set-point near full. While a
  charger regulates (absorption or float) the terminal voltage is its set-point.

OCV tables are docs/ocv.md (common practice), rested, 25 degC, per 12 V block,
scaled by the number of 12 V blocks in series.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

#: SoC [%] and rested OCV [V] per 12 V block, docs/ocv.md (common practice).
#: Lead-acid tables are given at 0/25/50/75/100 %.
OCV_SOC_PCT_LEAD: tuple[float, ...] = (0.0, 25.0, 50.0, 75.0, 100.0)
OCV_FLOODED_12V: tuple[float, ...] = (11.89, 12.06, 12.24, 12.45, 12.65)
OCV_AGM_12V: tuple[float, ...] = (11.80, 12.00, 12.30, 12.60, 12.85)
#: LFP 4S: the docs/ocv.md trade table at 10..95 % (common practice). The end
#: points 0 % (12.0 V) and 100 % (13.6 V) are our extension from memory: the
#: knees below 10 % and above 95 % are steep on every LFP curve.
OCV_SOC_PCT_LFP: tuple[float, ...] = (0.0, 10.0, 20.0, 30.0, 40.0, 50.0, 70.0, 80.0, 90.0, 95.0, 100.0)
OCV_LFP_4S: tuple[float, ...] = (12.0, 12.8, 13.0, 13.1, 13.15, 13.2, 13.25, 13.3, 13.35, 13.4, 13.6)


def ocv_table(chemistry: str) -> tuple[np.ndarray, np.ndarray]:
    """Rested OCV table per 12 V block for a chemistry.

    Returns
    -------
    soc_pct, ocv_V : numpy.ndarray
        State of charge [%] (increasing) and open-circuit voltage [V] per 12 V block.
    """
    if chemistry == "lifepo4":
        return np.array(OCV_SOC_PCT_LFP), np.array(OCV_LFP_4S)
    if chemistry == "flooded":
        return np.array(OCV_SOC_PCT_LEAD), np.array(OCV_FLOODED_12V)
    if chemistry in ("agm", "gel"):
        return np.array(OCV_SOC_PCT_LEAD), np.array(OCV_AGM_12V)
    raise ValueError(f"unknown chemistry {chemistry!r}: expected lifepo4, agm, gel or flooded")


def open_circuit_voltage_V(soc_pct: np.ndarray | float, *, chemistry: str, blocks_12V: int = 1,
                           temperature_C: np.ndarray | float = 25.0,
                           temp_coeff_V_per_C_per_12V: float = 0.0) -> np.ndarray:
    """Rested open-circuit voltage of the bank [V].

    Parameters
    ----------
    soc_pct : array_like
        State of charge [%], clipped to 0-100.
    chemistry : str
        ``lifepo4``, ``agm``, ``gel`` or ``flooded``.
    blocks_12V : int
        12 V blocks in series (1 for 12 V, 2 for 24 V, 4 for 48 V).
    temperature_C : array_like
        Battery temperature [degC]; the table is at 25 degC.
    temp_coeff_V_per_C_per_12V : float
        OCV temperature coefficient per 12 V block [V/degC].
    """
    soc_tab, ocv_tab = ocv_table(chemistry)
    soc = np.clip(np.asarray(soc_pct, dtype=float), 0.0, 100.0)
    v12 = np.interp(soc, soc_tab, ocv_tab) + temp_coeff_V_per_C_per_12V * (np.asarray(temperature_C) - 25.0)
    return v12 * blocks_12V


def peukert_effective_current_A(current_A: np.ndarray | float, *, rated_current_A: float,
                                peukert_k: float) -> np.ndarray:
    """Peukert-corrected discharge current, clamped to at least the real current.

    ``I_eff = |I| (|I|/I_H)^(k-1)``, ``I_eff >= |I|`` (docs/peukert.md#corrected-current, common practice).

    Parameters
    ----------
    current_A : array_like
        Discharge current [A]; the sign is ignored.
    rated_current_A : float
        I_H = C_H / H [A].
    peukert_k : float
        Peukert exponent [-].
    """
    i = np.abs(np.asarray(current_A, dtype=float))
    factor = np.maximum(1.0, (i / rated_current_A) ** (peukert_k - 1.0))
    return i * factor


@dataclass(frozen=True)
class BankModel:
    """Everything the step loop needs to know about the bank (the simulation's truth).

    Attributes are in SI-with-units names; see the module docstring for the model.
    """

    chemistry: str
    blocks_12V: int
    capacity_Ah: float               # TRUE capacity at the rated rate [Ah]
    rated_hours: float               # H of the rating [h]
    peukert_k: float
    charge_efficiency: float         # Ah efficiency [-]
    internal_resistance_ohm: float
    polarisation_ohm: float
    relaxation_s: float
    absorption_V: float
    float_V: float
    soc_cv: float                    # SoC [-] where absorption (CV) starts
    absorption_end_current_A: float  # what the full bank still takes at absorption voltage [A]
    max_charge_current_A: float
    float_current_A: float
    rebulk_soc: float
    taper_exponent: float = 1.5
    ocv_temp_coeff_V_per_C_per_12V: float = 0.0
    low_voltage_disconnect_soc: float = 0.02
    no_charge_below_C: float | None = None   # LFP BMS blocks charging below 0 degC

    @property
    def rated_current_A(self) -> float:
        return self.capacity_Ah / self.rated_hours

    def acceptance_current_A(self, soc: float) -> float:
        """Current the bank accepts in absorption at this SoC [A] (bulk: the maximum)."""
        if soc <= self.soc_cv:
            return self.max_charge_current_A
        x = max(0.0, (1.0 - soc) / (1.0 - self.soc_cv))
        i_end = self.absorption_end_current_A
        return i_end + (self.max_charge_current_A - i_end) * x ** self.taper_exponent


@dataclass
class BankRun:
    """Per-step results of :func:`run_bank` (arrays of length n, one per internal step)."""

    soc_end: np.ndarray          # true SoC at the end of the step [-]
    net_A: np.ndarray            # net bank current, positive charging [A]
    source_factor: np.ndarray    # delivered / available for every charge source [-]
    load_A: np.ndarray           # load current magnitude actually drawn [A]
    load_scale: np.ndarray       # 1, or 0 while the low-voltage disconnect is open
    conv_V: np.ndarray           # voltage used to turn load power into current [V]
    voltage_V: np.ndarray        # terminal voltage, step value [V]
    vpol_end: np.ndarray         # relaxation voltage at the end of the step [V]
    regulated_V: np.ndarray      # charger set-point when regulating, NaN otherwise [V]
    mode: np.ndarray             # 0 bulk/discharge, 1 absorption-throttled, 2 float
    device_soc_end: np.ndarray   # the monitor's own SoC [-]
    full_steps: list[int] = field(default_factory=list)  # steps where the bank reached full


def run_bank(bank: BankModel, *, dt_s: float, source_A: np.ndarray, load_W: np.ndarray,
             source_W: np.ndarray | None = None, load_A: np.ndarray | None = None, temperature_C: np.ndarray | float = 25.0,
             soc0: float = 1.0, vpol0: float = 0.0,
             device_rated_Ah: float | None = None, device_offset_A: float = 0.0,
             device_gain_error: float = 0.0, device_efficiency: float = 1.0,
             device_soc0: float | None = None, enable_disconnect: bool = True) -> BankRun:
    """Simulate the bank step by step.

    Parameters
    ----------
    bank : BankModel
    dt_s : float
        Internal step [s].
    source_A : numpy.ndarray, shape (n,) or (n, m)
        Current each charge source could deliver into the bank this step [A] (>= 0).
    source_W : numpy.ndarray, shape (n,) or (n, m), optional
        Power a source could deliver this step [W] (an MPPT controller): its
        current is this power over the previous step's terminal voltage.
    load_W : numpy.ndarray, shape (n,)
        Mean load power at the bank terminals this step [W] (>= 0).
    load_A : numpy.ndarray, optional
        Additional constant-current load this step [A] (>= 0), e.g. a test discharge.
    temperature_C : array_like
        Battery temperature per step [degC].
    soc0, vpol0 : float
        Initial true SoC [-] and relaxation voltage [V].
    device_rated_Ah, device_offset_A, device_gain_error, device_efficiency, device_soc0
        The battery monitor's own coulomb counter: it counts against the rated
        capacity, reads ``I (1 + gain) + offset`` and resyncs to 100 % when the
        bank reaches full.
    enable_disconnect : bool
        Open the low-voltage disconnect (loads off) below
        ``bank.low_voltage_disconnect_soc``; off for test discharges to empty.

    Returns
    -------
    BankRun
    """
    src = np.asarray(source_A, dtype=float)
    if src.ndim == 1:
        src = src[:, None]
    n = src.shape[0]
    s_total = src.sum(axis=1).tolist()
    s_total_W = (np.zeros(n) if source_W is None else np.asarray(source_W, dtype=float).reshape(n, -1).sum(axis=1)).tolist()
    lw = np.broadcast_to(np.asarray(load_W, dtype=float), (n,)).tolist()
    la = (np.zeros(n) if load_A is None else np.broadcast_to(np.asarray(load_A, dtype=float), (n,))).tolist()
    temp = np.broadcast_to(np.asarray(temperature_C, dtype=float), (n,)).tolist()

    # OCV lookup on a 0.1 % grid: a list index is ~50x faster than np.interp on a scalar.
    grid = np.linspace(0.0, 100.0, 1001)
    ocv_grid = open_circuit_voltage_V(grid, chemistry=bank.chemistry, blocks_12V=bank.blocks_12V).tolist()
    tc = bank.ocv_temp_coeff_V_per_C_per_12V * bank.blocks_12V

    cap_As = bank.capacity_Ah * 3600.0
    i_h = bank.rated_current_A
    km1 = bank.peukert_k - 1.0
    eta = bank.charge_efficiency
    r0 = bank.internal_resistance_ohm
    rp = bank.polarisation_ohm
    a_rel = 1.0 - math.exp(-dt_s / bank.relaxation_s)
    v_abs, v_flt = bank.absorption_V, bank.float_V
    i_tail, i_float = bank.absorption_end_current_A, bank.float_current_A
    knee0 = bank.soc_cv - 0.1
    lvd = bank.low_voltage_disconnect_soc if enable_disconnect else -1.0
    cold = bank.no_charge_below_C
    acc = bank.acceptance_current_A

    dev_cap_As = (device_rated_Ah or bank.capacity_Ah) * 3600.0
    dsoc = soc0 if device_soc0 is None else device_soc0

    out_soc = [0.0] * n
    out_net = [0.0] * n
    out_f = [1.0] * n
    out_load = [0.0] * n
    out_scale = [1.0] * n
    out_conv = [0.0] * n
    out_v = [0.0] * n
    out_vpol = [0.0] * n
    out_reg = [math.nan] * n
    out_mode = [0] * n
    out_dsoc = [0.0] * n
    full_steps: list[int] = []

    soc = soc0
    vpol = vpol0
    full = soc0 >= 0.9999
    v_prev = ocv_grid[int(min(max(soc, 0.0), 1.0) * 1000)] + tc * (temp[0] - 25.0)
    for i in range(n):
        t_c = temp[i]
        scale = 0.0 if soc <= lvd else 1.0
        load = (la[i] + lw[i] / v_prev) * scale
        s = s_total[i] + s_total_W[i] / v_prev
        # What the bank accepts now.
        if cold is not None and t_c < cold:
            limit = 0.0
        elif full:
            limit = i_float if soc >= 0.9999 else i_tail
        else:
            limit = acc(soc)
        want = s - load
        mode = 0
        if want > limit:
            net = limit
            f = (load + limit) / s if s > 0 else 1.0
            mode = 2 if full else 1
        else:
            net = want
            f = 1.0
        # State of charge.
        if net >= 0.0:
            if not (full and soc >= 0.9999):  # float current is losses, not stored charge
                soc += eta * net * dt_s / cap_As
        else:
            ii = -net
            ratio = ii / i_h
            factor = ratio ** km1 if ratio > 1.0 else 1.0
            soc -= ii * factor * dt_s / cap_As
        if soc >= 1.0:
            soc = 1.0
            if not full:
                full = True
                full_steps.append(i)
        elif full and soc < bank.rebulk_soc:
            full = False
        # Terminal voltage.
        vpol += (net * rp - vpol) * a_rel
        sc = soc if soc > 0.0 else 0.0
        ocv = ocv_grid[int(sc * 1000.0)] + tc * (t_c - 25.0)
        v = ocv + net * r0 + vpol
        if net > 0.0 and sc > knee0:
            x = (sc - knee0) / (1.0 - knee0)
            v += max(0.0, v_abs - v) * x * x * x
        if mode:
            v = v_flt if full else v_abs
            out_reg[i] = v
        elif net > 0.0 and v > v_abs:
            v = v_abs
        # The monitor's own coulomb counter.
        meas = net * (1.0 + device_gain_error) + device_offset_A
        dsoc += (meas * device_efficiency if meas > 0 else meas) * dt_s / dev_cap_As
        if full_steps and full_steps[-1] == i:
            dsoc = 1.0
        dsoc = 0.0 if dsoc < 0.0 else (1.0 if dsoc > 1.0 else dsoc)

        out_soc[i] = soc
        out_net[i] = net
        out_f[i] = f
        out_load[i] = load
        out_scale[i] = scale
        out_conv[i] = v_prev
        out_v[i] = v
        out_vpol[i] = vpol
        out_mode[i] = mode
        out_dsoc[i] = dsoc
        v_prev = v

    return BankRun(
        soc_end=np.array(out_soc), net_A=np.array(out_net), source_factor=np.array(out_f),
        load_A=np.array(out_load), load_scale=np.array(out_scale), conv_V=np.array(out_conv),
        voltage_V=np.array(out_v), vpol_end=np.array(out_vpol), regulated_V=np.array(out_reg),
        mode=np.array(out_mode, dtype=np.int8), device_soc_end=np.array(out_dsoc), full_steps=full_steps,
    )
