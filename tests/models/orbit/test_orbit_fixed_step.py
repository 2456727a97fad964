"""Fixed-step RK4 of the map's reference orbits, and the map's grid span."""

import numpy as np
import pytest

from perierr.models.orbit import OrbitModel
from perierr.models.orbit import model as model_mod
from perierr.models.orbit.fixed_step import rk4_on_nodes
from perierr.units import AU_PER_PC


def _oscillator(omega):
    def fun(y):
        return np.array([y[1], -(omega**2) * y[0]])

    return fun


def test_rk4_on_nodes_against_the_harmonic_oscillator():
    # exact solution y = cos(w t), y' = -w sin(w t) (any mechanics textbook);
    # classical RK4 is of order 4, so halving the step divides the global error
    # by about 16 (Hairer, Norsett & Wanner 1993, Sect. II.1); the embedded
    # third-order estimate bounds the actual error
    omega = 1.3
    nodes = np.linspace(-2.0, 3.0, 11)  # contains 0, step 0.5
    exact = np.stack([np.cos(omega * nodes), -omega * np.sin(omega * nodes)], axis=1)
    errs = []
    for sub in (1, 2, 4):
        states, derivs, est = rk4_on_nodes(_oscillator(omega), np.array([1.0, 0.0]), nodes, substeps=sub)
        err = np.abs(states - exact).max(axis=0)
        errs.append(err.max())
        assert np.all(est >= err)
        # derivatives returned at the nodes are fun(state) there (first same as last)
        assert np.allclose(derivs[:, 0], states[:, 1], rtol=0, atol=1e-15)
        assert np.allclose(derivs[:, 1], -(omega**2) * states[:, 0], rtol=0, atol=1e-15)
    assert 12.0 < errs[0] / errs[1] < 20.0
    assert 12.0 < errs[1] / errs[2] < 20.0
    # RK4's stability function matches exp(z) up to z^4/24, the first omitted
    # term is z^5/120 (Hairer et al. 1993, Sect. IV.2): a global error of about
    # t w^5 h^4 / 120 = 2.3e-5 at t = 3, h = 0.125
    assert errs[2] == pytest.approx(2.25e-5, abs=0.75e-5)  # i.e. between 1.5e-5 and 3e-5


def test_perihelia_beyond_the_map_span_are_integrated_directly(monkeypatch):
    # cut the map's grid span at half the perihelion time: every sample's
    # perihelion is then beyond it, and the model must integrate them directly
    # (agreement with direct integration to 1e-3 au: the same DOP853 integrator
    # and grid, adaptive steps differ with the set of samples)
    nom = np.array([40.0, 20.0, 40.0, 10.0, -5.0, -25.0])  # invented, 25 pc, ~1 Myr
    rng = np.random.default_rng(21)
    s = nom + rng.normal(size=(300, 6)) * np.array([1e-7, 1e-7, 0.05, 0.05, 0.05, 0.5])
    direct = OrbitModel(method="direct").evaluate(s)
    real_span = model_mod._map_span

    def short_span(t_lin, nodes):
        sub, _, _ = real_span(0.5 * t_lin, nodes)
        return sub[sub <= 0.5 * np.min(t_lin)], False, True

    monkeypatch.setattr(model_mod, "_map_span", short_span)
    ph = OrbitModel().evaluate(s, reference=nom)
    assert ph.info["beyond_span_samples"] == s.shape[0]
    assert ph.info["fallback_samples"] == s.shape[0]
    assert ph.info["n_outside_window"] == 0
    assert np.max(np.abs(ph.distance_pc - direct.distance_pc)) * AU_PER_PC < 1e-3
    assert np.max(np.abs(ph.time_myr - direct.time_myr)) < 1e-8


def test_map_span_keeps_an_interval_on_each_side_of_now():
    # an invented star passing perihelion now (velocity perpendicular to the
    # line of sight, so straight-line times scatter around 0): the map's span
    # holds the nodes next to t = 0, and the map agrees with direct
    # integration (issue 3: p99 error below 0.5 au)
    nodes = np.linspace(-1.0, 1.0, 9)
    sub, cut_lo, cut_hi = model_mod._map_span(np.zeros(5), nodes)
    assert np.allclose(sub, [-0.25, 0.0, 0.25]) and cut_lo and cut_hi
    nom = np.array([70.0, -10.0, 30.0, 150.0, -80.0, 0.0])
    rng = np.random.default_rng(4)
    s = nom + rng.normal(size=(500, 6)) * np.array([1e-7, 1e-7, 0.05, 0.05, 0.05, 0.5])
    ph = OrbitModel().evaluate(s, reference=nom)
    direct = OrbitModel(method="direct").evaluate(s)
    assert ph.info["method"].startswith("state_transition_map")
    err = np.abs(ph.distance_pc - direct.distance_pc) * AU_PER_PC
    assert np.percentile(err, 99) < 0.5
