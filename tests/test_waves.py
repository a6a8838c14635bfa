"""Tests of plant.waves: synthesis, records, elevation at the ship and the wave roll moment."""

from __future__ import annotations

import math
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy import integrate, signal

from plant.constants import DEG, G, KNOT
from plant.spectra import Jonswap, PiersonMoskowitz, frequency_band
from plant.waves import (
    Components,
    EffectiveSlope,
    RaoTable,
    SeaInputError,
    components_from_elevation,
    read_elevation_csv,
    read_moment_csv,
    read_rao_csv,
    read_time_series_csv,
    regular_wave,
    synthesise,
    wave_elevation,
    wave_loads,
    wave_roll_moment,
    write_elevation_csv,
    write_moment_csv,
    write_rao_csv,
)

SEA = Jonswap(3.0, 9.0, 3.3)
SHIP = EffectiveSlope(displacement=4.0e6, gm=1.3, r_eff=0.75)


def _naive_slope_moment(c: Components, t: np.ndarray, beta: float, x: np.ndarray, model: EffectiveSlope) -> np.ndarray:
    """DEVELOPERS.md hand formula, term by term: M = Δ g GM r_eff Σ a k sin β sin ψ."""
    psi = np.outer(t, c.omega) - np.outer(x, c.wave_number * math.cos(beta)) + c.phase
    const = model.displacement * G * model.gm * model.r_eff
    return const * (np.sin(psi) @ (c.amplitude * c.wave_number * math.sin(beta)))


# --- synthesis -----------------------------------------------------------------------------------


def test_mean_synthesised_variance_over_seeds_equals_m0_of_the_band() -> None:
    # m0 = ∫ S dω (DNV-RP-C205 §3.5.1), here over the synthesis band by scipy.integrate.quad; the
    # random-phase sum has variance Σ a²/2 whose mean over jitter draws is that integral. The
    # tolerance is 4 standard errors of the mean of 200 draws (central limit theorem).
    lo, hi = frequency_band(SEA)
    m0_band, _ = integrate.quad(lambda w: float(SEA(w)), lo, hi, limit=200)
    v = np.array([synthesise(SEA, 400, np.random.default_rng(s)).variance for s in range(200)])
    assert abs(v.mean() / m0_band - 1.0) < 4.0 * v.std(ddof=1) / math.sqrt(v.size) / m0_band + 1e-12
    # and every single draw is close (loose: 5 %, a common-practice sanity bound)
    assert np.all(np.abs(v / m0_band - 1.0) < 0.05)


def _statistical_bandwidth_hz(sea: Jonswap) -> float:
    """B_e = (∫G df)²/∫G² df (Bendat & Piersol, Random Data, 4th ed. 2010, ch. 8), G per Hz."""
    f = np.linspace(1e-4, 2.0, 100_000)
    g_f = 2.0 * math.pi * sea(2.0 * math.pi * f)
    return float(np.trapezoid(g_f, f) ** 2 / np.trapezoid(g_f**2, f))


def test_variance_of_a_one_hour_record_matches_hs_squared_over_16_within_random_error() -> None:
    # Bendat & Piersol, Random Data (4th ed. 2010) ch. 8 §8.2: normalised random error of a
    # mean-square estimate ε = 1/√(B_e T); tolerance 3ε (≈ 0.18 here).
    # m0 = Hs²/16 (DNV-RP-C205 §3.5.1).
    c = synthesise(SEA, 400, np.random.default_rng(2024))
    t = np.arange(0.0, 3600.0, 0.25)
    z = wave_elevation(c, t, 0.0, np.zeros_like(t))
    eps = 1.0 / math.sqrt(_statistical_bandwidth_hz(SEA) * 3600.0)
    assert abs(np.var(z) / (SEA.hs**2 / 16.0) - 1.0) < 3.0 * eps


def test_same_seed_gives_identical_components_and_records_and_other_seeds_differ() -> None:
    # Requirement (DEVELOPERS.md, randomness): a run is reproducible from its seed.
    a = synthesise(SEA, 300, np.random.default_rng(11))
    b = synthesise(SEA, 300, np.random.default_rng(11))
    c = synthesise(SEA, 300, np.random.default_rng(12))
    for name in ("omega", "wave_number", "amplitude", "phase"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))
    t = np.arange(0.0, 200.0, 0.05)
    x = 6.0 * t
    la, lb, lc = (wave_loads(s, t, 2.0, x, SHIP) for s in (a, b, c))
    np.testing.assert_array_equal(la.moment, lb.moment)
    np.testing.assert_array_equal(la.elevation, lb.elevation)
    assert not np.allclose(la.elevation, lc.elevation)
    assert not np.array_equal(a.omega, c.omega) and not np.array_equal(a.phase, c.phase)


def _coherence_at_lag(z: np.ndarray, lag: int) -> float:
    """|normalised correlation| of the analytic signal with itself ``lag`` samples later."""
    za = signal.hilbert(z)  # reference library: scipy.signal.hilbert
    a, b = za[:-lag], za[lag:]
    return float(abs(np.vdot(a, b)) / math.sqrt(np.vdot(a, a).real * np.vdot(b, b).real))


def test_jittered_grid_record_does_not_repeat_but_a_uniform_grid_record_does() -> None:
    # Fourier series (e.g. Bendat & Piersol, Random Data, ch. 5): a sum of sinusoids at ω0 + iΔω
    # repeats, up to a common phase, every 2π/Δω, so the envelope of its autocorrelation
    # (analytic-signal coherence) at that lag is ≈ 1. With one random frequency per bin the
    # phases ω_i·lag are unrelated and the envelope is a random phasor sum of weights a_i²:
    # rms √(Σa⁴)/Σa² (Goodman, Statistical Optics, 1985, §2.9, random phasor sums; from memory),
    # plus record-length estimation noise 1/√(2 B_e T) (Bendat & Piersol ch. 8). The jittered
    # record must stay within 3 of those combined rms at one and two repeat periods.
    lo, hi = frequency_band(SEA)
    n = 400
    t_rep = 2.0 * math.pi / ((hi - lo) / n)  # ≈ 611 s: repeats ~6 times in an hour
    dt = 0.5
    t = np.arange(0.0, 3600.0, dt)
    uniform = synthesise(SEA, n, np.random.default_rng(7), grid="uniform")
    jittered = synthesise(SEA, n, np.random.default_rng(7))
    zu = wave_elevation(uniform, t, 0.0, np.zeros_like(t))
    zj = wave_elevation(jittered, t, 0.0, np.zeros_like(t))
    lag = int(round(t_rep / dt))
    assert _coherence_at_lag(zu, lag) > 0.95
    assert _coherence_at_lag(zu, 2 * lag) > 0.95
    w = jittered.amplitude**2
    phasor_rms = math.sqrt(np.sum(w**2)) / np.sum(w)
    noise = 1.0 / math.sqrt(2.0 * _statistical_bandwidth_hz(SEA) * (3600.0 - 2 * t_rep))
    bound = 3.0 * math.hypot(phasor_rms, noise)
    assert bound < 0.6  # the test can tell the two grids apart
    assert _coherence_at_lag(zj, lag) < bound
    assert _coherence_at_lag(zj, 2 * lag) < bound


def test_synthesis_requires_a_generator_and_a_valid_grid() -> None:
    with pytest.raises(TypeError, match="Generator"):
        synthesise(SEA, 10, 42)  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="grid"):
        synthesise(SEA, 10, np.random.default_rng(0), grid="cosine")
    with pytest.raises(ValueError, match="band"):
        synthesise(SEA, 10, np.random.default_rng(0), band=(2.0, 1.0))


def test_components_are_read_only_and_checked() -> None:
    c = synthesise(SEA, 20, np.random.default_rng(0))
    with pytest.raises(ValueError):
        c.amplitude[0] = 1.0
    with pytest.raises(ValueError, match="one length"):
        Components([1.0, 2.0], [0.1, 0.4], [1.0], [0.0, 0.0])
    with pytest.raises(ValueError, match="omega"):
        Components.deep_water([0.0], [1.0], [0.0])


# --- regular waves and elevation -----------------------------------------------------------------


def test_regular_wave_is_one_deep_water_component() -> None:
    # Linear (Airy) wave theory, DNV-RP-C205 §3.2: a = H/2, ω = 2π/T, k = ω²/g.
    c = regular_wave(8.0, height=3.0, phase=0.4)
    assert len(c) == 1
    assert c.amplitude[0] == 1.5
    assert c.omega[0] == pytest.approx(2 * math.pi / 8.0, rel=1e-15)
    assert c.wave_number[0] == pytest.approx((2 * math.pi / 8.0) ** 2 / 9.80665, rel=1e-15)
    z0 = wave_elevation(c, np.array([0.0]), 1.0, np.array([0.0]))
    assert z0[0] == pytest.approx(1.5 * math.cos(0.4), rel=1e-12)
    assert regular_wave(8.0, amplitude=1.5).amplitude[0] == 1.5
    with pytest.raises(ValueError, match="exactly one"):
        regular_wave(8.0, height=1.0, amplitude=0.5)


def test_beam_sea_crest_reaches_starboard_before_port() -> None:
    # DEVELOPERS.md: β = 90° is beam seas from starboard, waves travel along (0, −1) in the body
    # frame, so ζ at y = −b repeats ζ at y = +b after 2b/c, c = g/ω (deep-water phase speed,
    # DNV-RP-C205 §3.2).
    c = regular_wave(7.0, amplitude=1.0)
    w = c.omega[0]
    b = 5.0
    delay = 2 * b / (G / w)
    t = np.linspace(0.0, 20.0, 201)
    stbd = wave_elevation(c, t, 90 * DEG, np.zeros_like(t), y=+b)
    port_later = wave_elevation(c, t + delay, 90 * DEG, np.zeros_like(t), y=-b)
    np.testing.assert_allclose(port_later, stbd, atol=1e-12)


def test_elevation_encountered_at_speed_oscillates_at_the_encounter_frequency() -> None:
    # Fossen (2021) ch. 10: ω_e = ω − ω² U cos β / g; head seas (β = 180°), 12 kn, T = 9 s.
    c = regular_wave(9.0, amplitude=1.0)
    w = c.omega[0]
    u = 12.0 * KNOT
    we = w + w * w * u / G
    t = np.linspace(0.0, 60.0, 3001)
    z = wave_elevation(c, t, math.pi, u * t)
    np.testing.assert_allclose(z, np.cos(we * t), atol=1e-9)


# --- effective-slope roll moment ------------------------------------------------------------------


def test_effective_slope_moment_of_a_regular_beam_wave_matches_the_hand_formula() -> None:
    # Effective wave slope (Lloyd 1989, Seakeeping; Bhattacharyya 1978, Dynamics of Marine
    # Vehicles, ch. 8): in beam seas M = Δ g GM r_eff α0 sin ωt with the maximum wave slope
    # α0 = π H/λ, λ = g T²/(2π) (deep water). Hand: T = 8 s → λ = 99.89 m; H = 2 m → α0 = 0.062900.
    period, height = 8.0, 2.0
    lam = 9.80665 * period**2 / (2 * math.pi)
    assert lam == pytest.approx(99.89, abs=0.01)
    alpha0 = math.pi * height / lam
    amp = SHIP.displacement * 9.80665 * SHIP.gm * SHIP.r_eff * alpha0
    c = regular_wave(period, height=height)
    t = np.linspace(0.0, period, 401)  # includes T/4, where sin ωt = 1
    m = wave_roll_moment(c, t, 90 * DEG, np.zeros_like(t), SHIP)
    np.testing.assert_allclose(m, amp * np.sin(2 * math.pi * t / period), atol=1e-9 * amp)
    assert m[100] == pytest.approx(amp, rel=1e-12)


def test_surface_rising_to_starboard_gives_a_negative_roll_moment() -> None:
    # DEVELOPERS.md sign: M = −Δ g GM r_eff ∂ζ/∂y (the ship heels to port, φ < 0, when the surface
    # rises to starboard). ∂ζ/∂y by central differences of the elevation at y = ±1 mm; the
    # quotient's relative error per component is (k δ sin β)²/6 < 2e-6 for k < 3.5 rad/m.
    c = synthesise(PiersonMoskowitz(2.5, 8.0), 200, np.random.default_rng(3))
    beta, u = 60 * DEG, 5.0
    t = np.arange(0.0, 300.0, 0.1)
    x = u * t
    d = 0.001
    dzdy = (wave_elevation(c, t, beta, x, y=d) - wave_elevation(c, t, beta, x, y=-d)) / (2 * d)
    m = wave_roll_moment(c, t, beta, x, SHIP)
    const = SHIP.displacement * G * SHIP.gm * SHIP.r_eff
    np.testing.assert_allclose(m, -const * dzdy, atol=1e-3 * np.std(m))
    rising = dzdy > 0.1 * np.std(dzdy)
    assert rising.any() and np.all(m[rising] < 0.0)


def test_effective_slope_as_an_rao_has_minus_ninety_degree_phase() -> None:
    # |X| = Δ g GM r_eff k sin β and θ = −90° for 0 < β < 180° (the RAO form of the hand formula:
    # sin ψ = cos(ψ − 90°)); k = ω²/g (deep water).
    w = np.array([0.3, 0.8, 1.7])
    x = SHIP.transfer(w, 120 * DEG)
    np.testing.assert_allclose(np.angle(x), -math.pi / 2, rtol=1e-14)
    np.testing.assert_allclose(
        np.abs(x), SHIP.displacement * G * SHIP.gm * SHIP.r_eff * w**2 / G * math.sin(120 * DEG), rtol=1e-14
    )
    np.testing.assert_allclose(np.angle(SHIP.transfer(w, 240 * DEG)), math.pi / 2, rtol=1e-14)


@pytest.mark.parametrize("speed_profile", ["constant", "accelerating"])
def test_chunked_moment_equals_the_term_by_term_sum(speed_profile: str) -> None:
    # DEVELOPERS.md hand formula evaluated term by term with numpy; covers the evenly spaced
    # (table) path and the general path (X(t) not linear in t), and chunk boundaries.
    c = synthesise(SEA, 150, np.random.default_rng(5))
    t = np.arange(3000) * 0.02
    x = 7.0 * t if speed_profile == "constant" else 3.0 * t + 0.05 * t**2
    ref = _naive_slope_moment(c, t, 2.3, x, SHIP)
    for chunk in (37, 4096):
        m = wave_loads(c, t, 2.3, x, SHIP, chunk=chunk).moment
        np.testing.assert_allclose(m, ref, atol=1e-9 * np.max(np.abs(ref)))


def test_wave_loads_stay_within_100_mb_for_400_components_and_120001_samples() -> None:
    # Requirement (issue): bounded memory, < ~100 MB, for the lead's RK4 half-step grid.
    c = synthesise(SEA, 400, np.random.default_rng(1))
    t = np.arange(120_001) * 0.01
    tracemalloc.start()
    loads = wave_loads(c, t, 135 * DEG, 15 * KNOT * t, SHIP)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    assert loads.moment.shape == t.shape and np.all(np.isfinite(loads.moment))
    assert peak < 100e6


# --- RAO table -----------------------------------------------------------------------------------

# Table grid for the effective-slope RAO: 0°..180° every 15°, 0.2..6.0 rad/s every 0.05 rad/s.
_H_STEP = 15 * DEG
_W_STEP = 0.05
_TABLE = RaoTable.from_model(SHIP, np.arange(0, 181, 15) * DEG, np.arange(0.2, 6.0001, _W_STEP))


def _interpolation_bound(c: Components, heading_exact: bool) -> float:
    # Linear interpolation error |f − p| ≤ h² max|f''|/8 (Burden & Faires, Numerical Analysis,
    # Thm 3.3). f = ω² (f'' = 2) in frequency: h²/4; f = sin β (|f''| ≤ 1) in heading: Δβ²/8.
    const = SHIP.displacement * G * SHIP.gm * SHIP.r_eff / G
    per_component = const * (_W_STEP**2 / 4 + (0.0 if heading_exact else c.omega**2 * _H_STEP**2 / 8))
    return float(np.sum(c.amplitude * per_component))


@pytest.mark.parametrize("heading_deg, exact", [(135.0, True), (100.0, False), (225.0, True), (280.0, False)])
def test_rao_table_of_the_effective_slope_reproduces_its_moment(heading_deg: float, exact: bool) -> None:
    # Headings above 180° come from the 0–180° table by centreline symmetry X(360° − β) = −X(β),
    # which the effective-slope formula obeys (sin(360° − β) = −sin β).
    c = synthesise(SEA, 400, np.random.default_rng(9))
    t = np.arange(0.0, 600.0, 0.05)
    x = 8.0 * t
    beta = heading_deg * DEG
    ref = wave_roll_moment(c, t, beta, x, SHIP)
    loads = wave_loads(c, t, beta, x, _TABLE)
    assert loads.warnings == ()
    assert np.max(np.abs(loads.moment - ref)) <= _interpolation_bound(c, exact)
    assert np.sqrt(np.mean((loads.moment - ref) ** 2)) < 0.01 * np.std(ref)


def test_full_circle_rao_table_interpolates_across_360_degrees() -> None:
    # Same interpolation bound as above; 350° lies between the 345° row and the 0° row (= 360°).
    table = RaoTable.from_model(SHIP, np.arange(0, 346, 15) * DEG, np.arange(0.2, 6.0001, _W_STEP))
    assert not table.half
    c = synthesise(SEA, 200, np.random.default_rng(4))
    t = np.arange(0.0, 300.0, 0.05)
    ref = wave_roll_moment(c, t, 350 * DEG, 5.0 * t, SHIP)
    m = wave_roll_moment(c, t, 350 * DEG, 5.0 * t, table)
    assert np.max(np.abs(m - ref)) <= _interpolation_bound(c, heading_exact=False)


def test_rao_phase_convention_on_a_single_regular_wave() -> None:
    # Stated convention: M = |X| a cos(ψ + θ) for ζ = a cos ψ, so M leads ζ by θ.
    # Hand: |X| = 2000 N·m/m, θ = 30°, a = 1.5 m → M(0) = 3000 cos 30° = 2598.08 N·m.
    table = RaoTable([90 * DEG], [0.1, 5.0], [[2000.0, 2000.0]], [[30 * DEG, 30 * DEG]])
    c = regular_wave(7.0, amplitude=1.5)
    w = c.omega[0]
    t = np.linspace(0.0, 7.0, 841)
    loads = wave_loads(c, t, 90 * DEG, np.zeros_like(t), table)
    assert loads.moment[0] == pytest.approx(2598.08, rel=1e-5)
    np.testing.assert_allclose(loads.moment, 3000.0 * np.cos(w * t + 30 * DEG), atol=1e-9)
    np.testing.assert_allclose(loads.elevation, 1.5 * np.cos(w * t), atol=1e-12)
    # the moment's crest comes θ/ω = 7 s · 30/360 = 0.5833 s before the elevation's next crest
    assert t[np.argmax(loads.moment)] == pytest.approx(7.0 - 0.58333, abs=0.01)


def test_rao_table_gives_zero_outside_its_frequencies_and_says_so() -> None:
    table = RaoTable([0.0, math.pi], [0.5, 1.0], np.full((2, 2), 1000.0), np.zeros((2, 2)), "trial.csv")
    inside = Components.deep_water([0.8], [1.0], [0.0])
    both = Components.deep_water([0.3, 0.8, 1.4], [2.0, 1.0, 0.5], [0.1, 0.0, 0.2])
    t = np.linspace(0.0, 30.0, 301)
    a = wave_loads(inside, t, 0.0, np.zeros_like(t), table)
    b = wave_loads(both, t, 0.0, np.zeros_like(t), table)
    np.testing.assert_allclose(b.moment, a.moment, atol=1e-9)
    assert len(b.warnings) == 2
    assert "below" in b.warnings[0] and "trial.csv" in b.warnings[0] and "1 of 3" in b.warnings[0]
    assert "above" in b.warnings[1]


def test_rao_table_refuses_headings_it_does_not_cover() -> None:
    table = RaoTable([60 * DEG, 120 * DEG], [0.5, 1.0], np.ones((2, 2)), np.zeros((2, 2)))
    with pytest.raises(ValueError, match="outside"):
        table.transfer(np.array([0.7]), 30 * DEG)
    # 300° mirrors to 60°: covered
    np.testing.assert_allclose(table.transfer(np.array([0.7]), 300 * DEG), -table.transfer(np.array([0.7]), 60 * DEG))


@given(beta=st.floats(0.0, math.pi), omega=st.floats(0.2, 6.0))
def test_half_table_mirror_matches_the_effective_slope_on_the_port_side(beta: float, omega: float) -> None:
    # Centreline symmetry X(360° − β) = −X(β) (documented in RaoTable) against the formula
    # X = −i Δ g GM r_eff (ω²/g) sin β at 360° − β, to within the interpolation bound.
    w = np.array([omega])
    got = _TABLE.transfer(w, 2 * math.pi - beta)[0]
    want = SHIP.transfer(w, 2 * math.pi - beta)[0]
    const = SHIP.displacement * G * SHIP.gm * SHIP.r_eff / G
    assert abs(got - want) <= const * (_W_STEP**2 / 4 + omega**2 * _H_STEP**2 / 8) * (1 + 1e-9)


# --- records from CSV ---------------------------------------------------------------------------


def test_fft_decomposition_recovers_two_known_tones() -> None:
    # Discrete Fourier transform of tones on the FFT grid (numpy.fft as reference): a record
    # 1.0 cos(ω1 t + 0.3) + 0.5 cos(ω2 t − 1.0), ω_j = 2π j/(N Δt), started at t0 = 100 s.
    n, dt, t0 = 512, 0.5, 100.0
    t = t0 + dt * np.arange(n)
    w1, w2 = 2 * math.pi * 20 / (n * dt), 2 * math.pi * 45 / (n * dt)
    z = 1.0 * np.cos(w1 * t + 0.3) + 0.5 * np.cos(w2 * t - 1.0) + 0.2  # + a mean, dropped
    c = components_from_elevation(t, z)
    assert c.omega[19] == pytest.approx(w1, rel=1e-12) and c.omega[44] == pytest.approx(w2, rel=1e-12)
    assert c.amplitude[19] == pytest.approx(1.0, rel=1e-9)
    assert c.amplitude[44] == pytest.approx(0.5, rel=1e-9)
    assert np.angle(np.exp(1j * c.phase[19])) == pytest.approx(0.3, abs=1e-9)
    assert np.angle(np.exp(1j * c.phase[44])) == pytest.approx(-1.0, abs=1e-9)
    others = np.delete(c.amplitude, [19, 44])
    assert np.max(others) < 1e-9
    # and the sum reproduces the record without its mean at every sample
    np.testing.assert_allclose(wave_elevation(c, t, 0.0, np.zeros_like(t)), z - 0.2, atol=1e-9)


def test_elevation_csv_round_trip_reproduces_the_record(tmp_path: Path) -> None:
    c = synthesise(SEA, 100, np.random.default_rng(8))
    t = np.arange(0.0, 400.0, 0.5)
    z = wave_elevation(c, t, 0.0, np.zeros_like(t))
    p = tmp_path / "elev.csv"
    write_elevation_csv(p, t, z)
    rec = read_elevation_csv(p)
    np.testing.assert_array_equal(rec.time, t)
    np.testing.assert_array_equal(rec.elevation, z)
    back = wave_elevation(rec.components(), t, 0.0, np.zeros_like(t))
    np.testing.assert_allclose(back, z - z.mean(), atol=1e-9)


def test_moment_csv_round_trip_and_linear_interpolation(tmp_path: Path) -> None:
    p = tmp_path / "moment.csv"
    t = np.array([0.0, 1.0, 3.0])
    m = np.array([0.0, 2000.0, -2000.0])  # N·m
    write_moment_csv(p, t, m)
    assert p.read_text().splitlines()[0] == "time_s,roll_moment_kN_m"
    rec = read_moment_csv(p)
    np.testing.assert_array_equal(rec.moment_n_m, m)
    # hand: halfway between 1 s (2 kN·m) and 3 s (−2 kN·m) is 0; at 0.25 s it is 0.5 kN·m
    np.testing.assert_allclose(rec.moment(np.array([0.25, 2.0, 3.0])), [500.0, 0.0, -2000.0], atol=1e-9)
    with pytest.raises(ValueError, match="outside"):
        rec.moment(np.array([3.5]))


def test_rao_csv_round_trip(tmp_path: Path) -> None:
    p = tmp_path / "rao.csv"
    write_rao_csv(p, _TABLE)
    back = read_rao_csv(p)
    np.testing.assert_allclose(back.headings, _TABLE.headings, rtol=1e-14)
    np.testing.assert_allclose(back.omega, _TABLE.omega, rtol=1e-14)
    np.testing.assert_allclose(back.magnitude, _TABLE.magnitude, rtol=1e-14)
    np.testing.assert_allclose(back.values, _TABLE.values, rtol=1e-12, atol=1e-9)
    assert back.half


def _write(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "bad.csv"
    p.write_text(text)
    return p


@pytest.mark.parametrize(
    "reader, text, row, column, words",
    [
        (read_moment_csv, "time_s,moment_kN_m\n0,1\n1,2\n", 1, "roll_moment_kN_m", "missing column"),
        (read_moment_csv, "time_s,roll_moment_kN_m\n0,1\n1,abc\n", 3, "roll_moment_kN_m", "not a number"),
        (read_moment_csv, "time_s,roll_moment_kN_m\n0,1\n1,nan\n", 3, "roll_moment_kN_m", "finite"),
        (read_moment_csv, "# trial 3\ntime_s,roll_moment_kN_m\n0,1\n2,2\n2,3\n", 5, "time_s", "increase"),
        (read_moment_csv, "time_s,roll_moment_kN_m\n0,1\n1,2,3\n", 3, None, "fields"),
        (read_moment_csv, "time_s,roll_moment_kN_m\n0,1\n", None, None, "at least 2"),
        (read_moment_csv, "", None, None, "empty"),
        (read_elevation_csv, "time_s,wave_elevation_m\n0,0\n1,0\n2,0\n3.5,0\n4.5,0\n", 5, "time_s", "evenly"),
        (read_elevation_csv, "time_s,wave_elevation_m\n0,0\n1,0\n2,0\n", None, None, "at least 4"),
        (read_rao_csv, "heading_deg,wave_frequency_rad_s,moment_kN_m_per_m,phase_deg\n"
                       "90,0.5,10,0\n90,1.0,-10,0\n", 3, "moment_kN_m_per_m", "≥ 0"),
        (read_rao_csv, "heading_deg,wave_frequency_rad_s,moment_kN_m_per_m,phase_deg\n"
                       "90,0.5,10,0\n90,0.5,11,0\n", 3, None, "second row"),
        (read_rao_csv, "heading_deg,wave_frequency_rad_s,moment_kN_m_per_m,phase_deg\n"
                       "90,0.5,10,0\n90,1.0,10,0\n120,0.5,10,0\n", None, None, "no row for heading 120"),
        (read_rao_csv, "heading_deg,wave_frequency_rad_s,moment_kN_m_per_m,phase_deg\n"
                       "400,0.5,10,0\n400,1.0,10,0\n", 2, "heading_deg", "out of range"),
    ],
)
def test_malformed_csv_files_name_the_file_row_column_and_reason(
    tmp_path: Path, reader, text: str, row: int | None, column: str | None, words: str
) -> None:
    p = _write(tmp_path, text)
    with pytest.raises(SeaInputError) as info:
        reader(p)
    err = info.value
    assert isinstance(err, ValueError)
    assert err.path == str(p) and str(p) in str(err)
    assert err.row == row
    assert err.column == column
    assert words in str(err)


def test_time_series_reader_picks_elevation_or_moment_from_the_header(tmp_path: Path) -> None:
    pe, pm, pb = tmp_path / "e.csv", tmp_path / "m.csv", tmp_path / "b.csv"
    t = np.arange(8) * 0.5
    write_elevation_csv(pe, t, np.sin(t))
    write_moment_csv(pm, t, 1000.0 * t)
    pb.write_text("time_s,heave_m\n0,1\n1,2\n")
    assert hasattr(read_time_series_csv(pe), "elevation")
    np.testing.assert_allclose(read_time_series_csv(pm).moment(np.array([1.25])), [1250.0])
    with pytest.raises(SeaInputError, match="exactly one") as info:
        read_time_series_csv(pb)
    assert info.value.row == 1


def test_missing_file_is_a_sea_input_error(tmp_path: Path) -> None:
    with pytest.raises(SeaInputError, match="cannot read"):
        read_moment_csv(tmp_path / "nope.csv")


@pytest.mark.parametrize("omega,heading_deg", [(0.4, 90.0), (0.9, 90.0), (1.4, 60.0), (2.2, 120.0)])
def test_beam_averaged_slope_equals_numerical_mean_of_the_surface_slope_across_the_beam(omega, heading_deg):
    # Mean slope over the waterplane: (1/B)∫ ∂ζ/∂y dy for ζ = a cos(ωt − k_y y), k_y = k sin β,
    # k = ω²/g (deep-water dispersion, DNV-RP-C205 §3.2), integrated with scipy.integrate.quad and
    # compared with the closed form the model uses (amplitude of the moment per metre of wave).
    from scipy.integrate import quad

    beam = 22.0
    beta = math.radians(heading_deg)
    k_y = omega**2 / G * math.sin(beta)
    avg_cos = quad(lambda y: k_y * math.cos(k_y * y), -beam / 2, beam / 2)[0] / beam  # at phase 0 (y-even part)
    model = EffectiveSlope(displacement=4.0e6, gm=1.3, r_eff=0.75, beam_m=beam)
    x = abs(model.transfer(np.array([omega]), beta)[0]) / (4.0e6 * G * 1.3 * 0.75)
    assert x == pytest.approx(abs(avg_cos), rel=1e-9)
    # and B = 0 is the centreline slope k sin β
    plain = EffectiveSlope(displacement=4.0e6, gm=1.3, r_eff=0.75)
    assert abs(plain.transfer(np.array([omega]), beta)[0]) / (4.0e6 * G * 1.3 * 0.75) == pytest.approx(abs(k_y), rel=1e-12)
