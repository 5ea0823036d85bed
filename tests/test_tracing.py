"""render/geodesics/tracing.py: the front door -- method choice, the two methods agreeing,
escape directions, chunking and the sign of E.

A handful of distant-observer rays (8 per spin) keeps this fast.  The two methods are
independent computations of the same geodesics: the Dormand-Prince integrator of the
second-order Mino-time equations (render.geodesics.integrator) and the elliptic-integral
closed form (Gralla & Lupsasca 2020, render.geodesics.closed_form); each is checked
against outside references in tests/test_geodesics.py and tests/test_closed_form.py.
"""

from types import SimpleNamespace

import numpy as np
import pytest

from render.camera.observers import distant_observer_rays
from render.geodesics.integrator import FATE_ESCAPED
from render.geodesics.tracing import (TraceSettings, energy_signs, escape_directions,
                                      resolve_method, trace, trace_bundle)

# Rays that escape after one or two crossings, wind round (three), and are captured.
ALPHA = np.array([0.0, 3.0, -6.0, 8.0, 2.0, -1.5, 30.0, 0.5])
BETA = np.array([7.0, -5.0, 4.0, 9.0, 0.3, -12.0, 25.0, 4.0])
# The integrator's relative tolerance for the comparison: at 1e-11 its crossing radii
# agree with the closed form to ~3e-10 M (measured); the default 1e-9 gives ~3e-8.
TIGHT = 1e-11


@pytest.mark.parametrize("method,kind,expected", [
    ("auto", "distant", "closed_form"),
    ("auto", "camera", "integrate"),
    ("integrate", "distant", "integrate"),
    ("integrate", "camera", "integrate"),
    ("closed_form", "distant", "closed_form"),
])
def test_resolve_method_table(method, kind, expected):
    assert resolve_method(method, kind) == expected


def test_closed_form_for_a_camera_is_refused_in_one_line():
    with pytest.raises(ValueError) as info:
        resolve_method("closed_form", "camera")
    message = str(info.value)
    assert "\n" not in message
    assert "observer.placement: distant" in message and "'camera'" in message


def test_unknown_methods_are_refused():
    with pytest.raises(ValueError, match="closed_form"):
        resolve_method("shooting", "distant")
    bundle = distant_observer_rays(ALPHA[:1], BETA[:1], 0.0, 60.0)
    # trace() takes resolved methods only: "auto" must have been resolved before.
    with pytest.raises(ValueError, match="resolved"):
        trace(TraceSettings(spin=0.0, method="auto"), ALPHA[:1], BETA[:1], bundle)


@pytest.fixture(scope="module", params=[(0.0, 60.0), (0.9, 75.0), (-0.5, 30.0)],
                ids=["a0-i60", "a0.9-i75", "a-0.5-i30"])
def both_methods(request):
    spin, inclination = request.param
    bundle = distant_observer_rays(ALPHA, BETA, spin, inclination)
    common = dict(spin=spin, inclination_deg=inclination, orders=3, want_escape=True)
    integrated = trace(TraceSettings(method="integrate", tolerance=TIGHT, **common), ALPHA, BETA,
                       bundle)
    closed = trace(TraceSettings(method="closed_form", **common), ALPHA, BETA, bundle)
    return spin, bundle, integrated, closed


def test_integrator_and_closed_form_give_the_same_crossings(both_methods):
    _, _, integrated, closed = both_methods
    np.testing.assert_array_equal(integrated["fate"], closed["fate"])
    np.testing.assert_array_equal(integrated["n_crossings"], closed["n_crossings"])
    np.testing.assert_array_equal(integrated["inward"], closed["inward"])
    for name in ("r", "phi"):
        assert np.array_equal(np.isnan(integrated[name]), np.isnan(closed[name])), name
        # 1e-8 M in r and 1e-8 rad in phi: 30x the measured agreement at TIGHT.
        np.testing.assert_allclose(integrated[name], closed[name], rtol=0, atol=1e-8,
                                   equal_nan=True, err_msg=name)
    # The delay grows to ~160 M for rays that wind near the photon orbit; relative 1e-8
    # is 3x the measured 4e-9.
    np.testing.assert_allclose(integrated["delay"], closed["delay"], rtol=1e-8, atol=1e-8,
                               equal_nan=True)
    # Each case includes a capture and a ray with two or more crossings (the cases are
    # meant to cover them).
    assert (closed["fate"] != FATE_ESCAPED).any() and (closed["n_crossings"] >= 2).any()


def test_escape_directions_of_a_distant_observer(both_methods):
    spin, bundle, integrated, closed = both_methods
    for raw in (integrated, closed):
        theta, phi = escape_directions(bundle, raw, spin, TIGHT)
        escaped = raw["fate"] == FATE_ESCAPED
        # A distant observer's rays already end at u = 0: the directions are theirs.
        np.testing.assert_array_equal(theta[escaped], raw["theta_end"][escaped])
        np.testing.assert_array_equal(phi[escaped], raw["phi_end"][escaped])
        assert np.all(np.isnan(theta[~escaped])) and np.all(np.isnan(phi[~escaped]))
    # And the two methods agree on them (1e-7 rad: 8x the largest measured difference).
    escaped = closed["fate"] == FATE_ESCAPED
    np.testing.assert_allclose(integrated["theta_end"][escaped], closed["theta_end"][escaped],
                               rtol=0, atol=1e-7)
    turn = np.angle(np.exp(1j * (integrated["phi_end"][escaped] - closed["phi_end"][escaped])))
    np.testing.assert_allclose(turn, 0.0, atol=1e-7)


def test_chunks_do_not_change_the_result():
    bundle = distant_observer_rays(ALPHA, BETA, 0.7, 50.0)
    seen = []
    chunked = trace_bundle(bundle, 0.7, n_record=2, chunk_rays=3,
                           progress=lambda done, total: seen.append((done, total)))
    whole = trace_bundle(bundle, 0.7, n_record=2)
    assert chunked.keys() == whole.keys()
    for name in whole:
        # Each ray is traced on its own: chunking must not change a single bit.
        np.testing.assert_array_equal(chunked[name], whole[name], err_msg=name)
    assert seen == [(3, 8), (6, 8), (8, 8)]


def test_energy_signs():
    bundle = SimpleNamespace(lam=np.zeros(5), energy_ratio=np.array([1.0, -0.5, 0.0, 2.0, -3.0]))
    # E < 0 only where the observer-measured energy per unit E is negative (a camera in the
    # ergoregion, Misner, Thorne & Wheeler 1973, sec. 33.8); 0 is taken as +1.
    assert energy_signs(bundle).tolist() == [1.0, -1.0, 1.0, 1.0, -1.0]
    scalar = SimpleNamespace(lam=np.zeros(3), energy_ratio=1.0)
    assert energy_signs(scalar).tolist() == [1.0, 1.0, 1.0]
