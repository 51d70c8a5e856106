"""Money over time, energy and cooling of owned nodes (model.md §6)."""

import numpy as np
import numpy_financial as npf
import pytest
from numpy.testing import assert_allclose

from service.domain.finance import capital_recovery_payment, monthly_rate
from service.domain.owning import (
    chargeback_per_accelerator_hour,
    cooling_tons,
    facility_energy_kwh,
    it_power_kw,
)
from service.domain.units import BTU_PER_HOUR_PER_KW, KW_PER_TON_OF_REFRIGERATION


def test_monthly_payment_matches_the_numpy_financial_documentation_example() -> None:
    # numpy-financial documentation, pmt: "What would the monthly payment need to be to pay off
    # a $200,000 loan in 15 years at an annual interest rate of 7.5%?"
    # pmt(0.075/12, 12*15, 200000) = -1854.0247200054619 (a payment out, hence the sign).
    payment = capital_recovery_payment(principal=200_000.0, rate=monthly_rate(0.075), periods=180)
    assert_allclose(payment, 1854.0247200054619, rtol=1e-12)


def test_capital_recovery_factor_at_ten_percent_over_five_years() -> None:
    # (A/P, 10%, 5) = i(1+i)^n/((1+i)^n − 1) = 0.2637975 to seven places, the value of the
    # compound-interest factor tables (from memory; numpy_financial.pmt(0.10, 5, -1) agrees).
    factor = capital_recovery_payment(principal=1.0, rate=0.10, periods=5)
    assert_allclose(factor, 0.2637975, rtol=0, atol=5e-8)
    assert_allclose(factor, npf.pmt(0.10, 5, -1.0), rtol=1e-12)


@pytest.mark.parametrize(
    ("principal", "annual_rate", "months", "residual"),
    [
        (339_000.0, 0.08, 48, 33_900.0),
        (538_000.0, 0.065, 60, 0.0),
        (1.0, 0.20, 360, 0.5),
        (100_000.0, 0.0, 48, 10_000.0),  # no cost of capital: straight-line (P − F)/n
        (100_000.0, 0.0, 36, 0.0),
    ],
)
def test_capital_recovery_with_a_residual_matches_numpy_financial(
    principal: float, annual_rate: float, months: int, residual: float
) -> None:
    # numpy_financial.pmt(rate, nper, pv, fv) with pv = −principal (received) and fv = residual
    # (recovered at the end) is the level charge that repays the principal less the residual.
    rate = annual_rate / 12
    payment = capital_recovery_payment(principal=principal, rate=rate, periods=months,
                                       residual=residual)
    assert_allclose(payment, npf.pmt(rate, months, -principal, residual), rtol=1e-12)


def test_capital_recovery_handles_zero_and_nonzero_rates_in_one_array() -> None:
    rates = np.array([0.0, 0.005, 0.01])
    payment = capital_recovery_payment(principal=12_000.0, rate=rates, periods=24, residual=1_000.0)
    assert_allclose(payment, npf.pmt(rates, 24, -12_000.0, 1_000.0), rtol=1e-12)


def test_a_ton_of_refrigeration_is_twelve_thousand_btu_per_hour() -> None:
    # NIST SP 811 (2008), App. B.8: ton of refrigeration (12,000 Btu_IT/h) = 3.516 853 E+03 W;
    # Btu_IT/h = 2.930 711 E-01 W (from memory), that is 1 kW = 3,412.14 Btu_IT/h. Each factor
    # is rounded to seven digits, so they agree to 1e-6.
    assert_allclose(cooling_tons(KW_PER_TON_OF_REFRIGERATION), 1.0, rtol=1e-15)
    assert_allclose(cooling_tons(12_000.0 / BTU_PER_HOUR_PER_KW), 1.0, rtol=1e-6)
    assert_allclose(12_000.0 * 0.2930711 / 1000.0, KW_PER_TON_OF_REFRIGERATION, rtol=1e-6)


def test_cooling_load_in_tons_scales_with_the_heat_load() -> None:
    kw = np.array([0.0, 100.0, 1000.0])
    assert_allclose(cooling_tons(kw), kw / 3.516853, rtol=1e-15)


def test_pue_is_facility_energy_over_it_energy() -> None:
    # ISO/IEC 30134-2:2016 (and EN 50600-4-2:2016): PUE = total facility energy / IT equipment
    # energy; the facility energy of an IT load is therefore IT energy × PUE.
    it_kwh = np.array([1_000.0, 2_500.0, 10.0])
    pue = np.array([1.1, 1.35, 2.0])
    facility = facility_energy_kwh(it_kwh=it_kwh, pue=pue)
    assert_allclose(facility / it_kwh, pue, rtol=1e-15)
    assert np.all(facility >= it_kwh)


def test_it_power_runs_from_idle_to_peak_with_the_load() -> None:
    # nodes × (idle + (peak − idle) × load) (model.md §6); demo node of 2.4 kW idle, 10.2 kW peak.
    power = it_power_kw(nodes=4.0, idle_kw=2.4, peak_kw=10.2, load=np.array([0.0, 0.5, 1.0]))
    assert_allclose(power, [9.6, 25.2, 40.8], rtol=1e-12)


def test_chargeback_spreads_the_fixed_cost_over_the_used_hours() -> None:
    # c(u) = F/(A·730·u) + v (model.md §6); demo: F = 14,600 per node-month, A = 8, v = 0.1.
    cost = chargeback_per_accelerator_hour(
        fixed_per_node_month=14_600.0, accelerators_per_node=8,
        variable_per_accelerator_hour=0.1, utilisation=np.array([1.0, 0.5, 0.25]),
    )
    assert_allclose(cost, [2.6, 5.1, 10.1], rtol=1e-12)
