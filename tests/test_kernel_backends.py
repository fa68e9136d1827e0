"""The compiled transmission kernel against the numpy implementation.

The numpy implementation is itself checked against analytic results in
``test_transmission.py`` (both implementations run those checks); here the
two are compared on random stacks, shapes and edge cases, where they must
agree to round-off (the compiled one uses real arithmetic and the SIMD
vector math library, accurate to a few ulp per call: glibc manual, "Known
Maximum Errors in Math Functions").
"""

from __future__ import annotations

import importlib
import os
from pathlib import Path

import numpy as np
import pytest
from helpers_physics import custom_table, flat_profile
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from wellwright.physics.bands import linear_profile
from wellwright.physics.transmission import transmission

# the module (the package re-exports its function under the same name)
kernel = importlib.import_module("wellwright.physics.transmission")

pytestmark = [
    pytest.mark.skipif(
        "compiled" not in kernel.BACKENDS, reason="compiled kernel not built on this machine"
    ),
    # the compiled routines are compared with numpy only where they are the ones in use
    pytest.mark.skipif(
        kernel.DEFAULT_BACKEND != "compiled",
        reason="WELLWRIGHT_KERNEL forces the numpy kernel: no compiled routine in use",
    ),
]
#: Relative agreement demanded where T is not vanishingly small: round-off of ~60 slices of
#: complex recursions; an energy on a band edge (k^2 at its floor, eta ~ 1e6) costs most
#: (measured: 1.3e-12).
RTOL = 1e-10


def both(energy, profile, **kw):
    a = transmission(energy, profile=profile, backend="numpy", return_reflection=True, **kw)
    b = transmission(energy, profile=profile, backend="compiled", return_reflection=True, **kw)
    return a, b


def assert_same(a, b) -> None:
    (ta, ra), (tb, rb) = a, b
    assert ta.shape == tb.shape and ra.shape == rb.shape
    # where T underflows below 1e-250 both must still be tiny
    big = ta > 1e-250
    np.testing.assert_allclose(tb[big], ta[big], rtol=RTOL, atol=0)
    assert np.all(tb[~big] < 1e-240)
    np.testing.assert_allclose(rb, ra, rtol=0, atol=RTOL)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    n=st.integers(3, 8),
    seed=st.integers(0, 2**31 - 1),
    bias=st.floats(-1.0, 1.0),
)
def test_random_stacks_agree(n: int, seed: int, bias: float) -> None:
    rng = np.random.default_rng(seed)
    table = custom_table(
        rng.uniform(0.0, 1.2, n),
        rng.uniform(0.03, 0.2, n),
        np.concatenate([[0.0], rng.uniform(0.3, 12.0, n - 2), [0.0]]),
        alphas_per_ev=rng.uniform(0.0, 2.0, n),
    )
    p = linear_profile(table, [0.0, bias])
    # energies below, at and above every band edge, including negative ones
    e = np.linspace(-0.3, 1.6, 131)
    assert_same(*both(e, p))


def test_broadcast_shapes_agree() -> None:
    table = custom_table([0, 0.3, 0, 0.3, 0], [0.067, 0.092, 0.067, 0.092, 0.067], [0, 3, 5, 3, 0])
    p = linear_profile(table, np.linspace(0.0, 0.4, 5))  # batch (1, 5)
    e_shared = np.linspace(0.0, 0.5, 37)  # one grid for every bias
    e_own = np.linspace(0.0, 0.5, 37) + np.linspace(0, 0.01, 5)[:, None]  # (5, 37)
    for e in (e_shared, e_own[None], e_own):
        a, b = both(e, p)
        assert a[0].shape == (1, 5, 37)
        assert_same(a, b)


def test_thick_high_barrier_and_closed_contacts_agree() -> None:
    # 1 eV over 30 nm in 120 slices: T ~ 1e-130, no overflow in either implementation
    edges = np.concatenate([[0.0], np.full(120, 1.0), [0.0]])
    widths = np.concatenate([[0.0], np.full(120, 0.25), [0.0]])
    p = flat_profile(edges, 0.067, widths)
    e = np.linspace(-0.05, 0.9, 64)  # includes energies below the contacts' band edge
    a, b = both(e, p)
    assert_same(a, b)
    assert np.all(b[0][e <= 0] == 0.0) and np.all(b[1][e <= 0] == 1.0)


def test_ci_builds_the_compiled_kernel() -> None:
    # .ci/run sets WELLWRIGHT_REQUIRE_COMPILED=1: a silently skipped extension build would
    # otherwise leave CI on the slower fallback without anyone noticing
    if os.environ.get("WELLWRIGHT_REQUIRE_COMPILED") != "1":
        pytest.skip("only checked where WELLWRIGHT_REQUIRE_COMPILED=1")
    assert kernel.DEFAULT_BACKEND == "compiled"


@pytest.mark.parametrize("backend", ["numpy", "compiled"])
def test_rows_and_masks_pick_the_right_profiles(backend: str) -> None:
    # transmission_rows must equal the kernel on the selected profiles (profile.take), and
    # transmission_where must give 0 outside its mask (the refinement and the resolved lines
    # of the current use transmission_rows; transmission_where is the masked form of it)
    from wellwright.physics.transmission import transmission_rows, transmission_where

    table = custom_table(
        [[0, 0.3, 0, 0.3, 0], [0, 0.4, 0, 0.2, 0]],
        [0.067, 0.092, 0.067, 0.092, 0.067],
        [[0, 3, 5, 3, 0], [0, 2, 6, 4, 0]],
    )
    p = linear_profile(table, np.linspace(0.0, 0.3, 4))  # batch (2, 4)
    rows = (np.array([1, 0, 1, 1]), np.array([3, 0, 2, 0]))
    e = np.random.default_rng(3).uniform(0.0, 0.6, (4, 5))
    got = transmission_rows(e, profile=p, rows=rows, backend=backend)
    ref = transmission(e, profile=p.take(rows), backend="numpy")
    np.testing.assert_allclose(got, ref, rtol=RTOL, atol=0)
    mask = np.zeros((2, 4, 3), bool)
    mask[1, 2, 0] = mask[0, 3, 2] = True
    energy = np.random.default_rng(4).uniform(0.0, 0.6, (2, 4, 3, 6))
    out = transmission_where(energy, profile=p, mask=mask, backend=backend)
    assert np.all(out[~mask] == 0.0)
    for s, b, g in zip(*np.nonzero(mask)):
        one = transmission(energy[s, b, g], profile=p.take((s, b)), backend="numpy")
        np.testing.assert_allclose(out[s, b, g], one, rtol=RTOL, atol=0)
    single = p.take((0, 1))  # a profile without batch axes
    e1 = np.random.default_rng(5).uniform(0.0, 0.6, (3, 4))
    np.testing.assert_allclose(
        transmission_rows(e1, profile=single, rows=(), backend=backend),
        transmission(e1, profile=single, backend="numpy"),
        rtol=RTOL,
    )


def test_unknown_kernel_in_environment_is_one_line_exit_2(tmp_path, monkeypatch, capsys):
    # WELLWRIGHT_KERNEL names a kernel that is not built: an input error, nothing written
    from wellwright.optimize.cli import main

    monkeypatch.setattr(kernel, "DEFAULT_BACKEND", "fast")
    out = tmp_path / "out"
    stack = Path(__file__).resolve().parents[1] / "studies" / "inp_thz_oscillator.toml"
    assert main(["iv", str(stack), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "WELLWRIGHT_KERNEL" in err and "compiled" in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


# The compiled resonance bracketing and Poisson-Newton iteration against their numpy
# statements (physics.resonances.refine_bracketed, physics.electrostatics.solve_poisson_1d),
# which run where the default backend is numpy.


def _on_numpy(monkeypatch, fn):
    with monkeypatch.context() as m:
        m.setattr(kernel, "DEFAULT_BACKEND", "numpy")
        return fn()


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**31 - 1), bias=st.floats(0.0, 0.6))
def test_compiled_resonance_bracketing_agrees(seed: int, bias: float) -> None:
    # the rounds' logic alone: the same compiled T(E) under both, the numpy rounds where
    # the compiled ones are switched off
    from wellwright.physics import resonances
    from wellwright.physics.resonances import find_resonances

    rng = np.random.default_rng(seed)
    barrier = rng.uniform(0.2, 1.2)
    table = custom_table(
        [0.0, barrier, 0.0, barrier, 0.0],
        [0.067, 0.09, 0.067, 0.09, 0.067],
        [0.0, rng.uniform(0.5, 6.0), rng.uniform(2.0, 12.0), rng.uniform(0.5, 6.0), 0.0],
        alphas_per_ev=rng.uniform(0.0, 2.0, 5),
    )
    p = linear_profile(table, np.linspace(0.0, bias, 7))

    def run():
        return find_resonances(p, energy_min_ev=1e-6, energy_max_ev=barrier, n_coarse=64)

    with pytest.MonkeyPatch().context() as m:
        m.setattr(resonances, "compiled_refine_peaks", lambda *a, **k: None)
        rounds_only = run()  # compiled rounds, the end of refine_bracketed in numpy
        m.setattr(resonances, "compiled_bracket_rounds", lambda *a, **k: False)
        ref = run()
    got = run()  # rounds and end compiled (refine_peaks)
    for other in (got, rounds_only):
        np.testing.assert_array_equal(other.valid, ref.valid)
        for name in ("energy_ev", "width_ev", "peak_transmission"):
            np.testing.assert_allclose(getattr(other, name), getattr(ref, name), rtol=1e-12, atol=0)


@pytest.mark.parametrize("study", ["gaas_low_power_memory.toml", "inp_thz_oscillator.toml"])
def test_compiled_poisson_newton_agrees(study: str, monkeypatch) -> None:
    # each entry of the compiled iteration stops at its own largest update < 1e-7 eV, the
    # numpy one when the whole batch is there: the potentials agree to the tolerance's order
    from wellwright.physics.electrostatics import (
        ElectrostaticsConvergenceError,
        solve_stack_poisson,
    )
    from wellwright.physics.stack import load_stack

    table = load_stack(Path(__file__).resolve().parents[1] / "studies" / study).table()
    bias = np.linspace(0.0, 0.8, 9)
    g_ref, ref = _on_numpy(monkeypatch, lambda: solve_stack_poisson(table, bias))
    g_got, got = solve_stack_poisson(table, bias)
    np.testing.assert_allclose(got.potential_ev, ref.potential_ev, rtol=0, atol=1e-6)
    # well charge: the iteration's own tolerance (WELL_TOLERANCE relative, 1e7 cm^-2)
    np.testing.assert_allclose(got.well_sheet_cm2, ref.well_sheet_cm2, rtol=3e-4, atol=3e7)
    big = ref.electron_cm3 > 1e10
    np.testing.assert_allclose(got.electron_cm3[big], ref.electron_cm3[big], rtol=1e-4)
    for run in (lambda: solve_stack_poisson(table, bias, max_iterations=1),):
        with pytest.raises(ElectrostaticsConvergenceError, match="did not converge"):
            _on_numpy(monkeypatch, run)
        with pytest.raises(ElectrostaticsConvergenceError, match="did not converge"):
            run()


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**31 - 1), bias=st.floats(-0.6, 0.6), power=st.sampled_from([1, 3]))
def test_compiled_grid_states_agree(seed: int, bias: float, power: int) -> None:
    # the state search of find_resonances (T on its grid, the highest maxima, their
    # refinement) in one compiled call (grid_states, in chunks of 16 lanes) against its
    # numpy statement, which calls the compiled T(E) and refinement (chunks of 8): the same
    # numbers, bit for bit, on a batch of three stacks (zero-width padding slices, skipped
    # only in a chunk of one profile's energies)
    from wellwright.physics import resonances
    from wellwright.physics.resonances import find_resonances

    rng = np.random.default_rng(seed)
    barrier = rng.uniform(0.2, 1.2)
    thickness = np.zeros((3, 5))
    thickness[:, 1:4] = rng.uniform([0.5, 2.0, 0.5], [6.0, 16.0, 6.0], (3, 3))
    table = custom_table(
        np.broadcast_to([0.0, barrier, 0.0, barrier, 0.0], (3, 5)),
        [0.067, 0.09, 0.067, 0.09, 0.067],
        thickness,
        alphas_per_ev=rng.uniform(0.0, 2.0, 5),
    )
    p = linear_profile(table, np.linspace(0.0, bias, 7))
    n_max = int(rng.integers(1, 7))

    def run():
        return find_resonances(
            p, energy_min_ev=-0.2, energy_max_ev=barrier, n_coarse=64, n_max=n_max, edge_power=power
        )

    got = run()
    with pytest.MonkeyPatch().context() as m:
        m.setattr(resonances, "compiled_grid_states", lambda *a, **k: None)
        ref = run()
    np.testing.assert_array_equal(got.valid, ref.valid)
    for name in ("energy_ev", "width_ev", "peak_transmission"):
        np.testing.assert_array_equal(getattr(got, name), getattr(ref, name))


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**31 - 1), n_max=st.integers(0, 4), n_first=st.integers(0, 4))
def test_compiled_grid_states_first_maxima(seed: int, n_max: int, n_first: int) -> None:
    # the highest maxima, then the first ones along the grid, each refined: against the same
    # steps in numpy (local_peaks, the first maxima picked by hand, refine_grid_peaks)
    from wellwright.physics.resonances import local_peaks, refine_grid_peaks

    if n_max + n_first == 0:
        return
    rng = np.random.default_rng(seed)
    barrier = rng.uniform(0.3, 1.0)
    table = custom_table(
        [0.0, barrier, 0.0, barrier, 0.0],
        [0.067, 0.09, 0.067, 0.09, 0.067],
        [0.0, rng.uniform(0.5, 4.0), rng.uniform(8.0, 20.0), rng.uniform(0.5, 4.0), 0.0],
    )
    p = linear_profile(table, np.linspace(0.0, 0.3, 5))
    grid = np.broadcast_to(np.linspace(0.005, barrier, 48), p.batch_shape + (48,))
    got = kernel.compiled_grid_states(
        grid, profile=p, n_max=n_max, n_first=n_first, iterations=6, extra_rounds=6,
        loose_bracket=20.0, loose_fit=20.0, exact_peak=True,
    )  # fmt: skip
    t = transmission(grid, profile=p, backend="compiled")
    tall, tall_ok = local_peaks(t, max(n_max, 1))
    tall, tall_ok = tall[..., :n_max], tall_ok[..., :n_max]
    inner = (t[..., 1:-1] > t[..., :-2]) & (t[..., 1:-1] >= t[..., 2:])
    first = np.ones(p.batch_shape + (n_first,), int)
    first_ok = np.zeros(first.shape, bool)
    for row in np.ndindex(p.batch_shape):
        found = (np.nonzero(inner[row])[0] + 1)[:n_first]
        first[row][: found.size], first_ok[row][: found.size] = found, True
    index = np.concatenate([tall, first], axis=-1)
    valid = np.concatenate([tall_ok, first_ok], axis=-1)
    ref = refine_grid_peaks(grid, t=t, index=index, valid=valid, profile=p)
    np.testing.assert_array_equal(got[3], valid)
    for a, b in zip(got[:3], ref, strict=True):
        np.testing.assert_array_equal(a, b)
    assert n_first == 0 or valid[..., n_max:].any()  # the first maxima are there


def test_grid_states_empty_slots_and_bad_input() -> None:
    # below a single barrier T rises with energy, no interior maximum: every slot empty, its
    # centre the grid's second energy (as refine_grid_peaks leaves it); inconsistent buffers
    # raise instead of reading past them
    p = flat_profile(np.array([0.0, 0.3, 0.0]), np.full(3, 0.067), np.array([0.0, 2.0, 0.0]))
    grid = np.linspace(0.01, 0.25, 16)
    c, w, t, valid = kernel.compiled_grid_states(
        grid, profile=p, n_max=3, iterations=6, extra_rounds=6, loose_bracket=20.0,
        loose_fit=20.0, exact_peak=True,
    )  # fmt: skip
    assert not valid.any() and np.all(c == grid[1]) and np.isnan(w).all() and np.isnan(t).all()
    states = kernel._slices.grid_states
    edge, mass, alpha, width = p.slice_arrays
    with pytest.raises(ValueError, match="n_energy"):
        states(3, 16, grid[:10], edge, mass, alpha, width, 1.0, 3, 0, 6, 6, 20.0, 20.0, 1,
               np.empty(12))  # fmt: skip
    with pytest.raises(ValueError, match="n_energy"):
        states(3, 16, grid, edge, mass, alpha, width, 1.0, 3, 0, 6, 6, 20.0, 20.0, 1,
               np.empty(11))  # fmt: skip


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_compiled_well_root_step_agrees(seed: int, monkeypatch) -> None:
    # the well-charge root search (secant, Illinois regula falsi, reopening and settling a
    # collapsed bracket) stepped compiled and in numpy on the same charge functions, each
    # entry's F(n) smooth, or with a jump (no fixed point: the bracket collapses on it, is
    # reopened and then settled), or steep beside a fold: the same charges, bit for bit
    from wellwright.physics import electrostatics as es

    rng = np.random.default_rng(seed)
    shape = (3, 7)
    scale = rng.uniform(1e10, 1e12, shape)
    slope = rng.uniform(0.2, 3.0, shape)
    jumps = rng.random(shape) < 0.4
    jumps[0, :3] = True
    slope[jumps] = rng.uniform(0.2, 0.9, jumps.sum())  # F(n) < n beyond the jump: no root
    jump = rng.uniform(0.2, 2.0, shape) * scale * jumps
    # warm starts (a continuation from a charge): settled at their first collapse
    warm = rng.random(shape) < 0.4
    warm[1, :3] = jumps[1, :3] = True

    def charge(n):  # F >= 0
        smooth = scale * np.tanh(slope * n / scale)
        return np.where(n < 0.7 * scale, smooth + jump, smooth)

    def run(compiled: bool) -> list:
        with monkeypatch.context() as m:
            if not compiled:
                m.setattr(es, "compiled_kernel", lambda name: None)
            root = es._WellChargeRoot.start(shape, warm=warm)
            well, seen = np.where(warm, 1.5 * scale, 0.0), []
            done = np.zeros(shape, bool)
            for _ in range(40):
                target = charge(well)
                residual = target - well
                done = done | (
                    np.abs(residual) <= es.WELL_TOLERANCE * np.abs(target) + es.WELL_ABS_CM2
                )
                well = root.next_well(well, residual, target=target, done=done)
                seen.append((well.copy(), root.settled.copy(), root.reopened.copy()))
            return seen

    got, ref = run(True), run(False)
    for (w1, s1, r1), (w2, s2, r2) in zip(got, ref, strict=True):
        np.testing.assert_array_equal(w1, w2)
        np.testing.assert_array_equal(s1, s2)
        np.testing.assert_array_equal(r1, r2)
    assert ref[-1][1].any() and ref[-1][2].any()  # the jump's entries were settled
    settled, reopened = ref[-1][1], ref[-1][2]
    assert (settled & warm & ~reopened).any() and not (reopened & warm).any()
    bad = np.zeros(3)
    with pytest.raises(ValueError, match="state"):
        kernel._slices.well_root_step(np.zeros(30), bad, bad, bad, bad, 0, 0.5, 1e-4, 1e7)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_compiled_barrier_action_agrees(seed: int) -> None:
    # int kappa dz of the scattering channel's WKB couplings (physics/scattering.py,
    # _barrier_action) compiled and in numpy on random slices, barrier runs and energies
    # (below, across and above the barrier tops, NaN among them): the same numbers bit for
    # bit, in the shapes the channel uses (energy nodes (..., L, K) and a state's energy)
    from wellwright.physics import scattering as sc

    rng = np.random.default_rng(seed)
    batch, n = (2, 5), 14
    edge = rng.uniform(-0.3, 1.2, batch + (n,))
    mass = rng.uniform(0.02, 0.2, batch + (n,))
    width = rng.uniform(0.0, 0.6, batch + (n,))
    width[..., 3] = 0.0  # a padding slice
    lo, hi = 2, 12
    start = rng.integers(lo, 6, batch)
    stop = rng.integers(7, hi + 1, batch)
    idx = np.arange(n)
    run = (idx >= start[..., None]) & (idx < stop[..., None])
    run[0, 0] = False  # an entry without a barrier
    for shape in ((3, 40), (1, 96), (2, 1)):
        z = rng.uniform(-0.5, 1.5, batch + shape)
        z[0, 1, 0, 0] = np.nan
        assert sc.compiled_kernel("barrier_action") is not None
        got = sc._barrier_action(z, edge, mass, width, run, lo, hi)
        ref = sc._barrier_action(z, edge, mass, width, run, lo, hi, compiled=False)
        np.testing.assert_array_equal(got, ref)
        finite = np.ones(got.shape, bool)
        finite[0, 1, 0, 0] = False
        assert np.isnan(got[0, 1, 0, 0]) and np.all(np.isfinite(got[finite]))
        assert np.all(got[0, 0] == 0.0) and np.any(got > 0.0)
    bad = np.zeros(2 * n)
    with pytest.raises(ValueError, match="lo < hi"):
        kernel._slices.barrier_action(n, 5, 5, 1.0, np.zeros(4), bad, bad, bad,
                                      np.zeros(2 * n, bool), np.zeros(4))  # fmt: skip


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_compiled_well_shots_agree(seed: int) -> None:
    # -dE_n/dz_i of the roughness width and the states' kinetic energy in the well
    # (physics/scattering.py, _well_shots) compiled and in numpy on random wells (tilted, with deep and classically forbidden
    # slices, a zero-width padding slice, an entry without a well) and energies: the same
    # arithmetic, equal to 1e-12 (cos, sin, cosh, sinh are the C library's, not numpy's)
    from wellwright.physics import scattering as sc

    rng = np.random.default_rng(seed)
    batch, n = (3, 4), 16
    edge = rng.uniform(-0.4, 0.3, batch + (n,))
    edge[..., :4] = edge[..., -4:] = rng.uniform(0.6, 1.3, batch + (1,))  # the barriers
    edge[..., [0, -1]] = 0.0  # the contacts
    mass = rng.uniform(0.02, 0.15, batch + (n,))
    width = rng.uniform(0.1, 0.6, batch + (n,))
    width[..., [0, -1]] = 0.0
    width[..., 6] = 0.0  # a padding slice in the well
    barrier = edge > sc.BARRIER_MIN_EV
    barrier[..., 4:-4] = False
    barrier[0, 0] = False  # an entry without a well
    ones = np.ones_like(edge)
    geo = sc._geometry(edge, mass, width, barrier, 0.036 * ones, 10.9 * ones, 12.9 * ones)
    energy = rng.uniform(-0.1, 0.5, batch + (2,))
    assert sc.compiled_kernel("well_shots") is not None
    got = sc._well_shots(energy, geo, edge=edge, mass=mass, width=width)
    ref = sc._well_shots(energy, geo, edge=edge, mass=mass, width=width, compiled=False)
    assert got[0].shape == batch + (2, 2) and got[1].shape == batch + (2,)
    for a, b in zip(got, ref, strict=True):
        assert np.all(np.isfinite(a))
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-15)
    bad = np.zeros(n)
    with pytest.raises(ValueError, match="par"):
        kernel._slices.well_shots(n, 1, 1.0, np.zeros(1), np.zeros(6), bad, bad, bad,
                                  np.zeros(3))  # fmt: skip


@pytest.mark.parametrize("study", ["inp_thz_oscillator.toml", "gaas_low_power_memory.toml"])
def test_compiled_node_fluxes_agree(study: str, monkeypatch) -> None:
    # the scattering channel's couplings and reservoir fluxes at its energy nodes
    # (physics/scattering.py: _couplings, _reservoir_fluxes) compiled (node_arguments and
    # node_fluxes around numpy's exp, arctan and tanh) and in numpy, on every channel call of
    # the example stack's I-Vs (both polarities, linear and self-consistent profiles): the
    # channel's integrals and states the same, bit for bit
    from dataclasses import replace

    from wellwright.physics import current as cur
    from wellwright.physics import scattering as sc
    from wellwright.physics.iv import sweep
    from wellwright.physics.stack import load_stack

    stack = load_stack(Path(__file__).resolve().parents[1] / "studies" / study)
    seen, used = [], []
    channel, node_fluxes = cur.sequential_integral_ev2, sc._compiled_node_fluxes
    with monkeypatch.context() as m:
        m.setattr(
            cur, "sequential_integral_ev2", lambda *a, **k: seen.append((a, k)) or channel(*a, **k)
        )
        for electrostatics in ("linear", "self-consistent"):
            model = replace(
                stack.model, electrostatics=electrostatics, transport="scattering-assisted"
            )
            sweep(stack.table(), np.linspace(-0.6, 0.8, 15), model=model)
    assert len(seen) >= 4
    real = sc.compiled_kernel
    for args, kwargs in seen:
        with monkeypatch.context() as m:
            m.setattr(
                sc, "_compiled_node_fluxes", lambda *a: used.append(node_fluxes(*a)) or used[-1]
            )
            got = channel(*args, **kwargs)
        with monkeypatch.context() as m:
            m.setattr(sc, "compiled_kernel", lambda name: None if "node" in name else real(name))
            ref = channel(*args, **kwargs)
        np.testing.assert_array_equal(got[0], ref[0])
        np.testing.assert_array_equal(got[1], ref[1])
        for key in ref[2]:
            np.testing.assert_array_equal(got[2][key], ref[2][key])
    assert used and all(u is not None for u in used)  # the compiled passes ran
    bad = np.zeros(18)
    with pytest.raises(ValueError, match="rows x"):
        kernel._slices.node_fluxes(4, 1.0, bad, bad, bad, bad, bad, bad, bad, bad)


@pytest.mark.parametrize("study", ["inp_thz_oscillator.toml", "gaas_low_power_memory.toml"])
def test_compiled_well_charge_agrees(study: str) -> None:
    # the well-charge step's charge from the compiled state search (charge_arguments and
    # charge_sums around numpy's expm1, exp and log1p) against its numpy statement,
    # well_sheet_density_cm2, on three variants of the example stack (padding slices) at
    # both polarities, in the potentials without well charge and with random bumps that
    # move the states: the same numbers, bit for bit
    from wellwright.physics import electrostatics as es
    from wellwright.physics.fermi import fermi_level_ev
    from wellwright.physics.stack import load_stack

    base = load_stack(Path(__file__).resolve().parents[1] / "studies" / study).table()
    rng = np.random.default_rng(7)
    table = base.take([0, 0, 0]).with_thickness_nm(
        base.thickness_nm[[0, 0, 0]] * rng.uniform(0.85, 1.15, (3, base.thickness_nm.shape[1]))
    )
    bias = np.array([-0.7, -0.2, 0.0, 0.1, 0.3, 0.5, 0.9])
    grid, sol = es.solve_stack_poisson(table, bias, well_charge=False)
    mu = fermi_level_ev(
        table.doping_cm3[:, 0], mass_m0=table.mass_m0[:, 0], temperature_k=table.temperature_k
    )
    args = {"mu_emitter_ev": mu, "well_mass_m0": table.mass_m0.min(axis=1)}
    step = es._well_charge_target(table, grid, **args)
    assert isinstance(step, es._WellChargeStep)  # the compiled passes in use
    bias_2d = np.broadcast_to(bias, sol.potential_ev.shape[:-1])
    center = rng.uniform(grid.center_nm.min(), grid.center_nm.max(), (3, bias.size, 1))
    for bump_ev in (0.0, 0.05, -0.08):
        u = sol.potential_ev + bump_ev * np.exp(-(((grid.center_nm[:, None] - center) / 4.0) ** 2))
        expected = es.well_sheet_density_cm2(table, grid, potential_ev=u, bias_v=bias, **args)[0]
        np.testing.assert_array_equal(step(u, bias_2d), expected)
        assert np.all(expected >= 0) and np.any(expected > 0)
    bad = np.zeros(3)
    with pytest.raises(ValueError, match="n_slots"):
        kernel._slices.charge_sums(4, np.zeros(40), bad, bad, bad, bad, bad, np.zeros(3))
