"""The shared checks' thresholds at their documented values, from both sides, with the numbers written here.

The tests beside them (test_disagrees.py, test_imprecise.py) place a well at ``DISAGREE_Z`` or
``IMPRECISE_K`` read from the module, so they follow the constant wherever it moves. Here each threshold is
the value the module text and docs/rates.md ("Flags: measured") state: DISAGREES beyond 3 standard errors of
the difference, IMPRECISE where the SE exceeds 0.5 of the model-free tolerance and the distance 1.25 of
it, the tolerance the larger of 5 % of v0 and twice SE_q, and the difference SE at least 0.3 of the larger
SE. The gap is composed by hand from the model-free estimate (the early quadratic, checked against
numpy.polyfit in test_rate_helper_fields.py) by the Hausman (1978, Econometrica 46:1251) form written out
below. Curves: Michaelis–Menten wells integrated by scipy's solve_ivp
(:func:`vzero.plugins.kinetics.simulate.simulate_plate`), invented values.
"""

from __future__ import annotations

import numpy as np
import pytest
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.rate_result import RateResult
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates import checks

T = np.arange(120) * 5.0  # s
SPC = 5.0  # AU/mM (invented)
S0 = np.array([0.5])  # mM


def _well() -> tuple[np.ndarray, checks.ModelFree]:
    """One curving well (S0 = Km, about 20 % converted) and its model-free estimate."""
    p = simulate_plate(T, S0, 0.5, 2e-4, signal_per_conc=SPC, baseline=0.05, noise=0.002, seed=31)
    return p.signal, checks.model_free(T, p.signal, s0=S0, signal_per_conc=SPC)


def _hausman_se(se_q: float, se: float) -> float:
    """SE of the difference of two estimates from the same reads, the more precise efficient:
    sqrt(|SE_q² - SE²|) (Hausman 1978), floored at 0.3 of the larger SE (module text)."""
    return float(np.sqrt(max(abs(se_q**2 - se**2), (0.3 * max(se_q, se)) ** 2)))


def _flags(res: RateResult) -> int:
    return int(np.asarray(res.flags)[0])


def test_difference_se_by_hand_on_both_sides_of_its_floor() -> None:
    # far apart: Hausman's form; equal or nearly so: 0.3 of the larger SE
    assert checks.difference_se(np.array([2.0]), np.array([1.0]))[0] == pytest.approx(np.sqrt(3.0))
    assert checks.difference_se(np.array([1.0]), np.array([1.0]))[0] == pytest.approx(0.3)
    assert checks.difference_se(np.array([1.0]), np.array([0.99]))[0] == pytest.approx(0.3)
    # just above the floor: |1 - 0.9^2| = 0.19 > 0.09
    assert checks.difference_se(np.array([0.9]), np.array([1.0]))[0] == pytest.approx(np.sqrt(0.19))
    for a, b in ((3e-5, 1e-5), (1e-5, 1.05e-5), (2e-6, 7e-6)):
        got = checks.difference_se(np.array([a]), np.array([b]))[0]
        assert got == pytest.approx(_hausman_se(a, b), rel=1e-12)


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_disagrees_fires_beyond_three_standard_errors_of_the_difference(sign: float) -> None:
    y, ref = _well()
    vq, se_q, b = float(ref.v0[0]), float(ref.se[0]), float(ref.bias[0])
    se = 0.2 * se_q  # a more precise rate: the difference SE is sqrt(SE_q² - SE²)
    se_d = _hausman_se(se_q, se)
    assert se_d == pytest.approx(se_q * np.sqrt(0.96))

    def flagged(z: float) -> bool:
        v = vq + sign * (z * se_d + b * abs(vq))  # gap = (|v - vq| - b |vq|) / SE_d = z
        gap = checks.model_free_gap(T, y, np.array([v]), np.array([se]), s0=S0, signal_per_conc=SPC)[0]
        assert gap == pytest.approx(z, abs=1e-6)
        res = checks.mark_disagreement(T, y, RateResult(v0=np.array([v]), stderr=np.array([se])), s0=S0,
                                       signal_per_conc=SPC)
        return bool(_flags(res) & Flag.DISAGREES)

    assert not flagged(2.97)
    assert flagged(3.03)
    assert not flagged(0.5)


def test_the_model_free_tolerance_is_the_larger_of_five_percent_and_two_se() -> None:
    ref = checks.ModelFree(v0=np.array([1.0, 1.0, -2.0]), se=np.array([0.01, 0.04, 0.01]),
                           bias=np.zeros(3), usable=np.ones(3, bool))
    np.testing.assert_allclose(checks.model_free_tolerance(ref), [0.05, 0.08, 0.10])


def test_imprecision_figures_by_hand() -> None:
    ref = checks.ModelFree(v0=np.array([1.0, 1.0, 1.0]), se=np.array([0.01, 0.04, 0.01]),
                           bias=np.array([0.5, 0.5, 0.5]), usable=np.array([True, True, False]))
    share, far = checks.imprecision(np.array([1.2, 0.8, 1.2]), np.array([0.05, 0.02, 0.05]), ref)
    # tolerances 0.05 and 0.08; the bias is not allowed for; unusable reads give NaN
    np.testing.assert_allclose(share[:2], [1.0, 0.25])
    np.testing.assert_allclose(far[:2], [4.0, 2.5])
    assert np.isnan(share[2]) and np.isnan(far[2])


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_imprecise_at_half_a_tolerance_of_se_and_one_and_a_quarter_of_distance(sign: float) -> None:
    y, ref = _well()
    vq = float(ref.v0[0])
    tol = max(0.05 * abs(vq), 2.0 * float(ref.se[0]))  # module text: the larger of 5 % and twice SE_q

    def flagged(se_share: float, distance: float) -> bool:
        res = checks.mark_imprecision(T, y, RateResult(v0=np.array([vq + sign * distance * tol]),
                                                       stderr=np.array([se_share * tol])),
                                      s0=S0, signal_per_conc=SPC)
        return bool(_flags(res) & Flag.IMPRECISE)

    assert flagged(0.51, 1.26)
    assert not flagged(0.49, 1.26)  # as precise as the careful analysis: not the flag's business
    assert not flagged(0.51, 1.24)  # within the tolerance it is allowed
    assert flagged(3.0, 3.0)


@pytest.mark.parametrize("missing", ["s0", "signal_per_conc"])
def test_every_check_needs_both_the_substrate_and_the_signal_per_concentration(missing: str) -> None:
    # the module text: without either the checks are skipped quietly and the result comes back unchanged, even
    # for a rate five times the model-free estimate, a fit that failed, and a well that would be compared
    y, ref = _well()
    res = RateResult(v0=np.array([5.0 * float(ref.v0[0])]), stderr=np.array([1e-7]))
    kw: dict[str, object] = {"s0": S0, "signal_per_conc": SPC, missing: None}
    assert checks.mark_disagreement(T, y, res, **kw) is res
    assert checks.mark_imprecision(T, y, res, **kw) is res
    assert checks.compare_model_free(T, y, res, **kw) is res
    failed = RateResult(v0=np.array([np.nan]), flags=np.array([int(Flag.FIT_FAILED)]))
    assert checks.mark_decay(T, y, failed, modelled=False, **kw) is failed
    # with both given the same rate is flagged (the guard, not the rate, kept it unmarked)
    full = checks.compare_model_free(T, y, res, s0=S0, signal_per_conc=SPC)
    assert _flags(full) & Flag.DISAGREES


def test_compared_rows_are_the_rated_wells_without_a_lag() -> None:
    res = RateResult(v0=np.array([1.0, np.nan, 1.0, 1.0]),
                     flags=np.array([0, int(Flag.FIT_FAILED), int(Flag.LAG), int(Flag.NOISY)]))
    assert checks.compared_rows(res).tolist() == [0, 3]


def test_decay_marks_unmodelled_only_where_the_method_does_not_model_it() -> None:
    # strong first-order inactivation (k = 4e-3 /s, half-life under 3 min) at 1 mM, far above Km: the rate
    # falls far faster than depletion explains (under 10 % converted). A failed fit is checked too (a decay
    # is then the likely reason); a well without a rate and without a failed fit is not.
    s0 = np.full(3, 1.0)
    p = simulate_plate(T, s0, 0.05, 4e-4, k_inact=4e-3, signal_per_conc=SPC, baseline=0.05, noise=0.001,
                       seed=33)
    res = RateResult(v0=np.array([1.0, np.nan, np.nan]), flags=np.array([0, int(Flag.FIT_FAILED), 0]))
    own = checks.mark_decay(T, p.signal, res, s0=s0, signal_per_conc=SPC, modelled=True)
    other = checks.mark_decay(T, p.signal, res, s0=s0, signal_per_conc=SPC, modelled=False)
    assert [bool(f & Flag.DECAY) for f in own.flags] == [True, True, False]
    assert not any(f & Flag.UNMODELLED for f in own.flags)
    assert [bool(f & Flag.UNMODELLED) for f in other.flags] == [True, True, False]
    # a stable enzyme on the same wells: no decay
    q = simulate_plate(T, s0, 0.05, 4e-4, signal_per_conc=SPC, baseline=0.05, noise=0.001, seed=33)
    assert checks.mark_decay(T, q.signal, res, s0=s0, signal_per_conc=SPC, modelled=False) is res


def test_each_check_reads_eight_reads_by_default() -> None:
    # the checks' default min_points is eight (module text of the methods they follow): a well of eight reads
    # is judged by every check called without it, and with nine required it is not (a rate three times the
    # model-free estimate, far less precise than it)
    t = np.arange(8) * 20.0
    p = simulate_plate(t, S0, 0.5, 4e-4, signal_per_conc=SPC, baseline=0.05, noise=0.0005, seed=6)
    ref = checks.model_free(t, p.signal, s0=S0, signal_per_conc=SPC)
    assert bool(ref.usable[0]) and np.isfinite(ref.v0[0])
    assert not checks.model_free(t, p.signal, s0=S0, signal_per_conc=SPC, min_points=9).usable[0]
    v, se = np.array([3.0 * float(ref.v0[0])]), np.array([float(ref.v0[0])])
    gap = checks.model_free_gap(t, p.signal, v, se, s0=S0, signal_per_conc=SPC)
    assert np.isfinite(gap[0])
    assert np.isnan(checks.model_free_gap(t, p.signal, v, se, s0=S0, signal_per_conc=SPC, min_points=9)[0])
    res = RateResult(v0=v, stderr=se)
    assert _flags(checks.mark_imprecision(t, p.signal, res, s0=S0, signal_per_conc=SPC)) & Flag.IMPRECISE
    assert checks.mark_imprecision(t, p.signal, res, s0=S0, signal_per_conc=SPC, min_points=9) is res
    precise = RateResult(v0=v, stderr=np.array([1e-7]))
    assert _flags(checks.mark_disagreement(t, p.signal, precise, s0=S0, signal_per_conc=SPC)) & Flag.DISAGREES
    assert checks.mark_disagreement(t, p.signal, precise, s0=S0, signal_per_conc=SPC, min_points=9) is precise
    assert _flags(checks.compare_model_free(t, p.signal, precise, s0=S0, signal_per_conc=SPC)) & Flag.DISAGREES
