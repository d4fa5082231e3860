"""Cable and fuse sizing against published tables, formulas and worked examples.

Check values: docs/cables.md (cables and fuses) and docs/chargers.md (inverters, DC-DC chargers).
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from drawdown.analysis import wiring as w

# ---- ASTM B258 ---------------------------------------------------------------

# ASTM B258 formula d_n = 0.127 mm * 92^((36-n)/39); areas as tabulated in docs/cables.md (computed), to 0.01 mm2.
ASTM_B258_AREAS_MM2 = {"2": 33.63, "4": 21.15, "6": 13.30, "8": 8.37, "10": 5.26, "12": 3.31, "14": 2.08}


@pytest.mark.parametrize("gauge,area", ASTM_B258_AREAS_MM2.items())
def test_awg_area_matches_astm_b258_table(gauge, area):
    # Source: ASTM B258 (formula) / docs/cables.md#conductor-sizes AWG table.
    assert w.awg_area_mm2(gauge) == pytest.approx(area, abs=0.006)


def test_awg_36_is_the_formula_anchor_of_0_127_mm():
    # ASTM B258: the gauge series is anchored at 36 AWG = 0.005 in = 0.127 mm.
    assert w.awg_diameter_mm(36) == pytest.approx(0.127, rel=1e-12)


def test_awg_4_0_is_0_46_inch():
    # ASTM B258: 0000 AWG = 0.4600 in = 11.684 mm (the other anchor of the series; from memory).
    assert w.awg_diameter_mm("4/0") == pytest.approx(11.684, abs=0.001)


@pytest.mark.parametrize("gauge,mohm", {"2": 0.513, "4": 0.815, "6": 1.296, "8": 2.061, "10": 3.277,
                                        "12": 5.211, "14": 8.286}.items())
def test_awg_resistance_at_20C_matches_docs(gauge, mohm):
    # docs/cables.md#conductor-sizes mOhm/m at 20 degC (computed) from IEC 60028 resistivity and ASTM B258 areas.
    assert w.awg_resistance_ohm_per_m(gauge) * 1000 == pytest.approx(mohm, abs=0.001)


def test_unknown_awg_size_is_rejected_naming_it():
    with pytest.raises(ValueError, match="'5/0'"):
        w.awg_number("5/0")


# ---- IEC 60228 ---------------------------------------------------------------

def test_iec60228_nominal_sizes_are_the_standard_series():
    # IEC 60228 nominal cross-sections 0.75 ... 120 mm2 (docs/cables.md#conductor-sizes, verified).
    assert w.METRIC_SIZES_MM2 == (0.75, 1, 1.5, 2.5, 4, 6, 10, 16, 25, 35, 50, 70, 95, 120)


@pytest.mark.parametrize("area,plain,tinned", [(0.75, 26.0, 26.7), (2.5, 7.98, 8.21), (10, 1.91, 1.95),
                                               (35, 0.554, 0.565), (120, 0.161, 0.164)])
def test_iec60228_class5_resistance_at_20C(area, plain, tinned):
    # IEC 60228 class 5 maximum resistance at 20 degC, ohm/km (docs/cables.md#conductor-sizes table, verified).
    assert w.iec60228_resistance_ohm_per_m(area) * 1000 == pytest.approx(plain)
    assert w.iec60228_resistance_ohm_per_m(area, tinned=True) * 1000 == pytest.approx(tinned)


def test_iec60228_class5_is_above_the_solid_resistivity_value():
    # Fine stranding: every class 5 maximum exceeds rho20/A of the nominal area (IEC 60228 vs IEC 60028).
    for area in w.METRIC_SIZES_MM2:
        assert w.iec60228_resistance_ohm_per_m(area) > w.RHO_20_OHM_MM2_PER_M / area


def test_non_nominal_metric_size_is_rejected():
    with pytest.raises(ValueError, match="not an IEC 60228 nominal size"):
        w.iec60228_resistance_ohm_per_m(7.0)


# ---- IEC 60028 resistivity and voltage drop ----------------------------------

def test_copper_resistivity_is_one_over_58_at_20C():
    # IEC 60028: 1/58 ohm mm2/m = 1.7241e-8 ohm m.
    assert w.copper_resistivity(20.0) * 1e-6 == pytest.approx(1.7241e-8, rel=1e-4)


def test_voltage_drop_5m_20A_4mm2_is_0_862V():
    # docs/cables.md#check-values (computed): 5 m, 20 A, 4 mm2 -> 0.862 V (7.2 % of 12 V).
    v = w.voltage_drop_V(20, 5, 4)
    assert v == pytest.approx(0.862, abs=0.001)
    assert v / 12 * 100 == pytest.approx(7.2, abs=0.05)


def test_voltage_drop_at_60C_is_0_998V():
    # docs/cables.md#check-values (computed): same run at 60 degC conductor temperature -> 0.998 V (IEC 60028 alpha).
    assert w.voltage_drop_V(20, 5, 4, temperature_C=60) == pytest.approx(0.998, abs=0.001)


def test_voltage_drop_3m_10A_6mm2_is_0_172V():
    # docs/cables.md#check-values (computed): 3 m, 10 A, 6 mm2 -> 0.172 V (1.44 %).
    v = w.voltage_drop_V(10, 3, 6)
    assert v == pytest.approx(0.172, abs=0.001)
    assert v / 12 * 100 == pytest.approx(1.44, abs=0.01)


def test_three_percent_of_12V_at_5m_20A_needs_9_58mm2_so_10mm2():
    # docs/cables.md#check-values (computed): A = 2 L I rho / (f V) >= 9.58 mm2 -> 10 mm2 nominal.
    need = w.minimum_area_mm2(20, 5, 12, 3)
    assert need == pytest.approx(9.58, abs=0.01)
    r = w.size_run(20, 5, 12, max_drop_pct=3, conductor_temperature_C=20, resistance_basis="resistivity")
    assert r.cross_section_mm2 == 10


def test_class5_resistance_at_30C_steps_the_same_run_up_to_16mm2():
    # IEC 60228 class 5 10 mm2 at 30 degC: 1.91 mOhm/m * 1.0393 -> 0.397 V = 3.3 % > 3 %, so 16 mm2.
    r = w.size_run(20, 5, 12, conductor_temperature_C=30)
    assert r.cross_section_mm2 == 16
    assert r.voltage_drop_pct <= 3


# ---- usual metric matches (common practice) ---------------------------------

@pytest.mark.parametrize("mm2,awg", [(16, "6"), (10, "8"), (6, "10"), (35, "2")])
def test_usual_metric_match_is_the_nearest_awg_by_area(mm2, awg):
    # Common practice: 16 mm2 ~ 6 AWG, 10 mm2 ~ 8 AWG, 6 mm2 ~ 10 AWG, 35 mm2 ~ 2 AWG.
    nearest = min(w.AWG_SIZES, key=lambda g: abs(math.log(w.awg_area_mm2(g) / mm2)))
    assert nearest == awg


# ---- ampacity (33 CFR 183.425 Table 5) ---------------------------------------

@pytest.mark.parametrize("gauge,row", [("2", (140, 170, 180, 210, 225)), ("4", (105, 125, 135, 160, 170)),
                                       ("6", (80, 95, 100, 120, 125)), ("8", (55, 65, 70, 80, 90)),
                                       ("10", (40, 40, 55, 60, 70)), ("12", (25, 25, 40, 45, 50)),
                                       ("14", (20, 20, 30, 35, 40))])
def test_ampacity_matches_33cfr183_425_table5(gauge, row):
    # 33 CFR 183.425 Table 5, 60/75/90/105/125 degC insulation, outside engine spaces (docs/cables.md, verified).
    assert tuple(w.awg_ampacity_A(gauge, t) for t in w.INSULATION_RATINGS_C) == row


@pytest.mark.parametrize("gauge,row", [("18", (10, 10, 20, 20, 25)), ("16", (15, 15, 25, 25, 30)),
                                       ("1", (165, 195, 210, 245, 265)), ("1/0", (195, 230, 245, 285, 305)),
                                       ("2/0", (225, 265, 285, 330, 355)), ("3/0", (260, 310, 330, 385, 410)),
                                       ("4/0", (300, 360, 385, 445, 475))])
def test_ampacity_of_small_and_large_gauges_matches_the_cfr_text(gauge, row):
    # 33 CFR 183.425 Table 5 as printed in a public copy of the CFR text (federal.elaws.us, section 183.425).
    assert tuple(w.awg_ampacity_A(gauge, t) for t in w.INSULATION_RATINGS_C) == row


def test_engine_space_ampacity_of_105C_wire_matches_the_published_column():
    # A marine wire maker's appendix quoting 33 CFR 183.425: 105 degC wire inside engine spaces
    # 4 AWG 136 A, 2 AWG 178 A, 4/0 378 A (= 0.85 x table, rounded down).
    for gauge, inside in (("4", 136), ("2", 178), ("4/0", 378), ("10", 51)):
        assert int(w.awg_ampacity_A(gauge, 105) * w.ENGINE_SPACE_FACTOR[105]) == inside


def test_engine_space_derates_105C_insulation_by_0_85():
    # 33 CFR 183.425 Table 5 footnote, 105 degC: 0.85 (docs/cables.md: verified, derived); 4 AWG 160 A -> 136 A.
    r = w.size_run(100, 1, 12, engine_space=True, conductor_temperature_C=50)
    assert r.assumptions["derate_factors"]["engine_space"] == 0.85
    assert r.awg_choice.ampacity_A == pytest.approx(r.awg_choice.ampacity_table_A * 0.85)


@pytest.mark.parametrize("n,f", [(1, 1.0), (2, 1.0), (3, 0.70), (5, 0.60), (10, 0.50), (30, 0.40)])
def test_bundling_factors(n, f):
    # 33 CFR 183.425 bundling derates 0.70 / 0.60 / 0.50 (docs/cables.md#ampacity, from memory).
    assert w.bundling_factor(n) == f


def test_metric_ampacity_is_that_of_the_largest_awg_not_larger():
    # Conservative mapping (documented): 25 mm2 >= 21.15 mm2 (4 AWG) -> 4 AWG's 160 A at 105 degC.
    assert w.metric_ampacity_A(25, 105) == 160
    assert w.metric_ampacity_A(16, 105) == 120  # 16 >= 13.30 (6 AWG)
    assert w.metric_ampacity_A(0.75, 105) is None  # below 18 AWG


def test_hot_ambient_derates_ampacity():
    # Conductor-heating correction sqrt((Tins - Tamb)/(Tins - 30)) (NEC 310.15 form, from memory): 105 C at 60 C.
    assert w.ambient_factor(60, 105, 30) == pytest.approx(math.sqrt(45 / 75))
    assert w.ambient_factor(20, 105, 30) == 1.0


# ---- fuses ---------------------------------------------------------------------

def test_fuse_is_the_smallest_standard_rating_at_125_percent():
    # NEC 210.20(A)/215.3 (from memory): >= 1.25 x continuous; NEC 240.6(A) standard ratings.
    assert w.smallest_standard_fuse_A(20) == 25
    assert w.smallest_standard_fuse_A(108.2) == 150
    assert w.smallest_standard_fuse_A(1000) is None


def test_inverter_check_1000W_at_12V_is_92_6A_and_108_2A_at_cutoff():
    # docs/chargers.md#check-values: I_dc = P / (V eta): 1000 W, 12 V, 0.90 -> 92.6 A; 10.5 V, 0.88 -> 108.2 A.
    from drawdown.analysis.sizing import inverter_dc_current_A

    assert inverter_dc_current_A(1000, 12, 0.90) == pytest.approx(92.6, abs=0.05)
    assert inverter_dc_current_A(1000, 10.5, 0.88) == pytest.approx(108.2, abs=0.05)


def test_inverter_run_gets_150A_fuse_and_4AWG_at_105C():
    # docs/chargers.md worked sizing (self-made): 1.25 x 108.2 = 135 A -> 150 A fuse -> 4 AWG 105 degC (160 A).
    # Over 2 m at 92.6 A: 4 AWG drops 0.302 V (2.5 %), 25 mm2 class 5 drops 0.289 V (2.4 %) at 20 degC.
    r = w.size_run(92.6, 2, 12, protect_current_A=1000 / (10.5 * 0.88), conductor_temperature_C=20)
    assert r.fuse_A == 150
    assert r.awg == "4"
    assert r.awg_choice.ampacity_table_A == 160
    assert r.awg_choice.voltage_drop_V == pytest.approx(0.302, abs=0.001)
    assert r.cross_section_mm2 == 25
    assert r.voltage_drop_V == pytest.approx(0.289, abs=0.001)
    assert w.minimum_area_mm2(92.6, 2, 12, 3) == pytest.approx(17.7, abs=0.05)


def test_dc_dc_input_current_checks():
    # docs/chargers.md: I_in = I_out V_out / (V_in eta): 30 A at 14.4 V, 0.9: 13.2 V -> 36.4 A, 12.5 V -> 38.4 A.
    from drawdown.analysis.charging import dc_dc_input_current_A

    assert dc_dc_input_current_A(30, 14.4, 13.2, efficiency=0.9) == pytest.approx(36.4, abs=0.05)
    assert dc_dc_input_current_A(30, 14.4, 12.5, efficiency=0.9) == pytest.approx(38.4, abs=0.05)


def test_cable_is_stepped_up_when_no_fuse_fits_its_ampacity():
    # 50 A over 0.3 m: drop alone allows 4 mm2, but the 70 A fuse needs a cable of >= 70 A (10 mm2 -> 80 A).
    r = w.size_run(50, 0.3, 12)
    assert r.fuse_A == 70
    assert r.cross_section_mm2 == 10
    assert r.ampacity_A >= r.fuse_A


def test_no_standard_size_gives_nulls_and_a_reason():
    r = w.size_run(600, 10, 12)
    assert r.cross_section_mm2 is None and r.fuse_A is None
    assert "parallel" in r.why
    j = r.to_json()
    assert j["cross_section_mm2_why"] == r.why


def test_non_critical_default_limit_is_10_percent_with_its_source():
    r = w.size_run(5, 10, 12, circuit="non-critical")
    assert r.max_drop_pct == 10
    assert "ABYC E-11" in r.drop_limit_source


@pytest.mark.parametrize("kw,name", [({"current_A": -1}, "current_A"), ({"length_m": 0}, "length_m"),
                                     ({"voltage_V": float("nan")}, "voltage_V")])
def test_bad_input_is_rejected_naming_the_parameter(kw, name):
    args = {"current_A": 10, "length_m": 2, "voltage_V": 12} | kw
    with pytest.raises(ValueError, match=name):
        w.size_run(**args)


def test_every_run_carries_assumptions_placement_and_caution():
    r = w.size_run(10, 2, 12)
    assert {"conductor_temperature_C", "insulation_rating_C", "bundled_conductors", "length_one_way_m"} <= set(
        r.assumptions)
    assert "ABYC E-11 11.12.1.1" in r.placement
    assert any("qualified installer" in c for c in r.cautions)


# ---- properties -----------------------------------------------------------------

@settings(max_examples=300, deadline=None)
@given(current=st.floats(0.1, 400), length=st.floats(0.1, 15), voltage=st.sampled_from([12.0, 12.8, 24.0, 48.0]),
       drop=st.floats(0.5, 10), ins=st.sampled_from(w.INSULATION_RATINGS_C), temp=st.floats(-20, 55),
       bundled=st.integers(1, 12), engine=st.booleans(), protect_extra=st.floats(1.0, 1.3))
def test_no_sized_run_has_fuse_above_ampacity_or_drop_above_limit(current, length, voltage, drop, ins, temp,
                                                                   bundled, engine, protect_extra):
    # Safety rule (NEC 240.4, from memory): the fuse protects the cable; drop within its limit.
    r = w.size_run(current, length, voltage, max_drop_pct=drop, insulation_C=ins, conductor_temperature_C=temp,
                   bundled=bundled, engine_space=engine, protect_current_A=current * protect_extra)
    if r.cross_section_mm2 is None:
        assert r.why
        return
    for c in (r.metric, r.awg_choice):
        assert r.fuse_A <= c.ampacity_A + 1e-9
        assert c.voltage_drop_pct <= drop + 1e-9
    assert r.fuse_A >= 1.25 * r.protect_current_A - 1e-9
    assert r.fuse_A in w.STANDARD_FUSE_RATINGS_A


def test_separately_installed_conductor_is_at_least_16_awg():
    # 33 CFR 183.425(e): a conductor installed separately must be at least 16 AWG; (d) 18 AWG in a sheath.
    r = w.size_run(1.0, 0.5, 12)
    assert r.awg == "16" and r.cross_section_mm2 == 1.5
    r2 = w.size_run(1.0, 0.5, 12, sheathed=True)
    assert r2.awg == "18" and r2.cross_section_mm2 == 1.0
