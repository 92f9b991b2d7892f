"""Interaction forms: the rates are the published functional responses."""

from __future__ import annotations

import pytest

from preyscape.model.reactions import FORMS, Interaction, rates


def test_forms_reduce_to_each_other():
    # Holling 1959 type II with h = 0 is the linear response; Beddington-DeAngelis with
    # c = 0 is Holling type II (Beddington 1975; DeAngelis et al. 1975).
    N, P, r, iK, m = 3.0, 2.0, 1.5, 0.1, 0.4
    lv = rates(N, P, r, iK, m, Interaction("logistic-prey", 0.7, efficiency=0.5))
    h0 = rates(N, P, r, iK, m, Interaction("holling-ii", 0.7, 0.0, 0.5))
    assert lv == pytest.approx(h0)
    hii = rates(N, P, r, iK, m, Interaction("holling-ii", 0.7, 0.2, 0.5))
    bd0 = rates(N, P, r, iK, m, Interaction("beddington-deangelis", 0.7, 0.2, 0.5, 0.0))
    assert hii == pytest.approx(bd0)


def test_holling_type_ii_values():
    # f = a N / (1 + a h N); dN = r N (1 - N/K) - f P; dP = e f P - m P
    a, h, e, N, P, r, K, m = 0.5, 0.25, 0.3, 4.0, 2.0, 1.0, 10.0, 0.2
    f = a * N / (1 + a * h * N)
    dn, dp = rates(N, P, r, 1 / K, m, Interaction("holling-ii", a, h, e))
    assert dn == pytest.approx(r * N * (1 - N / K) - f * P)
    assert dp == pytest.approx(e * f * P - m * P)


def test_refuge_shields_prey_from_predation():
    inter = Interaction("lotka-volterra", 1.0, efficiency=1.0)
    dn, dp = rates(1.0, 1.0, 1.0, 0.0, 0.5, inter, refuge=1.0)
    assert (dn, dp) == pytest.approx((1.0, -0.5))


def test_lotka_volterra_ignores_capacity_and_handling():
    inter = Interaction("lotka-volterra", 1.0, handling_time=5.0, efficiency=1.0)
    assert inter.h == 0.0 and not inter.logistic
    assert set(FORMS) == {"lotka-volterra", "logistic-prey", "holling-ii",
                          "beddington-deangelis"}
    with pytest.raises(ValueError):
        Interaction("ratio-dependent", 1.0)
