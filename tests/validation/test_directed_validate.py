"""The directed-loop checks of ``qmc validate`` (qmc.validation.directed_cases), run small: they produce
passing rows against their references, and a deliberately wrong reference fails."""

from __future__ import annotations

import io
import math

import numpy as np
import pytest

from qmc.validation.checks import Check
from qmc.validation.directed_cases import KT_TEMPERATURE, _crossing, saturation_case, xxz_cluster_case
from qmc.validation.references import Reference
from qmc.validation.runner import run_cases


def test_xxz_cluster_and_saturation_checks_pass():
    cases = [xxz_cluster_case("chain L=8", "chain", (8,), 1.5, 1.0, 0.5, 0.4, measure=100_000, bins=50),
             saturation_case(4, (4.5,), 12.0, measure=5000, bins=20)]
    checks = run_cases(cases, workers=1, stream=io.StringIO())
    assert len(checks) == 7
    for c in checks:
        assert c.passed, (c.case, c.value, c.error, c.reference.value)
    sat = checks[-1]
    assert sat.value == pytest.approx(0.5, abs=1e-3) and sat.systematic == pytest.approx(
        1.0 / math.expm1(12.0 * 0.5))
    wrong = Check(sat.case, sat.value, sat.error, Reference(0.45, 0.0, "deliberately wrong"), sat.systematic)
    assert not wrong.passed


def test_stiffness_crossing_is_interpolated_with_its_error():
    temps = np.array([0.30, 0.35, 0.40])
    rho = 2.0 * temps / math.pi + np.array([0.02, 0.01, -0.01])  # crosses halfway between 0.35 and 0.40
    t, dt = _crossing(temps, rho, np.array([0.001, 0.002, 0.002]))
    assert t == pytest.approx(0.375)
    assert dt > 0
    with pytest.raises(ValueError, match="crosses 2T/pi 0 times"):
        _crossing(temps, rho + 1.0, np.ones(3))
    assert "Harada and Kawashima" in KT_TEMPERATURE.source
