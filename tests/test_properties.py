"""Property tests (hypothesis) of the kernel over random stacks.

Properties, not reference values: probability bounds, flux conservation
(R + T = 1 for a Hermitian, lossless problem with BenDaniel-Duke matching,
Phys. Rev. 152, 683 (1966)), reciprocity of T under reversal of the stack at
zero bias (time-reversal symmetry of the same Hamiltonian; common practice),
and finiteness and sign of the Tsu-Esaki current (Appl. Phys. Lett. 22, 562 (1973)).
"""

from __future__ import annotations

import numpy as np
from helpers_physics import custom_table, flat_profile
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from wellwright.physics.bands import linear_profile
from wellwright.physics.current import current_density_a_cm2
from wellwright.physics.stack import parse_stack
from wellwright.physics.transmission import transmission

SETTINGS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@st.composite
def custom_stacks(draw, *, same_contacts: bool = False):
    """3-7 layers: edges 0-1 eV, masses 0.03-0.15 m0, thicknesses 0.5-10 nm, alpha 0-1.5/eV."""
    n = draw(st.integers(3, 7))
    edges = draw(st.lists(st.floats(0.0, 1.0), min_size=n, max_size=n))
    masses = draw(st.lists(st.floats(0.03, 0.15), min_size=n, max_size=n))
    alphas = draw(st.lists(st.floats(0.0, 1.5), min_size=n, max_size=n))
    thick = [0.0] + draw(st.lists(st.floats(0.5, 10.0), min_size=n - 2, max_size=n - 2)) + [0.0]
    if same_contacts:
        edges[-1], masses[-1], alphas[-1] = edges[0], masses[0], alphas[0]
    return np.array(edges), np.array(masses), np.array(alphas), np.array(thick)


@st.composite
def gaas_algaas_stacks(draw):
    """GaAs contacts and 1-5 GaAs / AlxGa1-xAs layers (x in [0, 0.45]) through the stack parser."""
    n_inner = draw(st.integers(1, 5))
    layers = [{"material": "GaAs", "doping_cm3": 1e18}]
    for _ in range(n_inner):
        x = draw(st.floats(0.0, 0.45))
        thickness = draw(st.floats(0.5, 10.0))
        layers.append({"material": "AlGaAs", "x": x, "thickness_nm": thickness})
    layers.append({"material": "GaAs", "doping_cm3": 1e18})
    return parse_stack({"temperature_k": 300.0, "layers": layers}, source="<hypothesis>")


@SETTINGS
@given(stack=custom_stacks(), bias=st.floats(-0.8, 0.8))
def test_transmission_bounded_and_flux_conserving(stack, bias) -> None:
    edges, masses, alphas, thick = stack
    table = custom_table(edges, masses, thick, alphas_per_ev=alphas)
    p = linear_profile(table, [0.0, bias])
    e = np.linspace(1e-4, float(np.ptp(edges)) + abs(bias) + 0.3, 60)
    t, r = transmission(e, profile=p, return_reflection=True)
    assert np.all(np.isfinite(t)) and np.all(np.isfinite(r))
    assert np.all((t >= 0) & (t <= 1)) and np.all((r >= 0) & (r <= 1))
    # R + T = 1 where both contacts propagate (issue 2: 1e-9)
    emitter = p.edge_ev[0, :, 0][:, None]
    collector = p.edge_ev[0, :, -1][:, None]
    both = (e[None, :] > emitter + 1e-9) & (e[None, :] > collector + 1e-9)
    np.testing.assert_allclose((t + r)[0][both], 1.0, rtol=0, atol=1e-9)


@SETTINGS
@given(stack=custom_stacks())
def test_reciprocity_of_reversed_stack_at_zero_bias(stack) -> None:
    # T(E) of the mirrored stack equals T(E) of the original at zero bias (flat bands),
    # where both contacts propagate; 1e-9 relative (issue 2).
    edges, masses, alphas, thick = stack
    forward = flat_profile(edges, masses, thick, alphas)
    backward = flat_profile(edges[::-1], masses[::-1], thick[::-1], alphas[::-1])
    floor = max(edges[0], edges[-1])
    e = floor + np.linspace(1e-3, float(np.max(edges)) - floor + 0.3, 60)
    t_f = transmission(e, profile=forward)
    t_b = transmission(e, profile=backward)
    np.testing.assert_allclose(t_b, t_f, rtol=1e-9, atol=0)


@SETTINGS
@given(stack=gaas_algaas_stacks())
def test_material_stacks_bounded_and_reciprocal(stack) -> None:
    table = stack.table()
    p0 = linear_profile(table, [0.0], slice_nm=stack.model.slice_nm)
    p_rev = linear_profile(
        type(table)(**{k: (v[:, ::-1] if v.ndim == 2 else v) for k, v in table.__dict__.items()}),
        [0.0],
        slice_nm=stack.model.slice_nm,
    )
    e = np.linspace(1e-3, float(p0.edge_ev.max()) + 0.3, 60)
    t, r = transmission(e, profile=p0, return_reflection=True)
    assert np.all((t >= 0) & (t <= 1))
    np.testing.assert_allclose(t + r, 1.0, rtol=0, atol=1e-9)
    np.testing.assert_allclose(transmission(e, profile=p_rev), t, rtol=1e-9, atol=0)


@SETTINGS
@given(stack=custom_stacks(same_contacts=True), bias=st.floats(0.01, 0.8))
def test_current_finite_and_signed(stack, bias) -> None:
    # identical contacts: J(0) = 0, J(V) > 0 for V > 0 and J(-V) < 0 (supply function sign,
    # T >= 0), all finite
    edges, masses, alphas, thick = stack
    table = custom_table(edges, masses, thick, alphas_per_ev=alphas)
    biases = np.array([-bias, 0.0, bias])
    j = current_density_a_cm2(linear_profile(table, biases), table=table, bias_v=biases[None, :])[0]
    assert np.all(np.isfinite(j))
    assert j[1] == 0.0
    assert j[2] >= 0.0 and j[0] <= 0.0
