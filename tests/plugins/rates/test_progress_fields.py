"""Every figure the progress-curve method reports, and its fail and restart rules, against hand calculations.

:func:`vzero.plugins.rates.progress.progress_curve` reports v0, the window (first and last read used), the
number of reads, the goodness ``1 - RSS/TSS``, Km, Vmax, the amplitude in signal units, the residual RMS over
the read noise, and FIT_FAILED where that ratio exceeds ``fail_ratio``. Here each is recomputed from the
fitted curve (residual sums by hand with numpy) or compared with the truth of noiseless curves integrated by
scipy's solve_ivp (:func:`vzero.plugins.kinetics.simulate.simulate_plate`, never the closed form the fit
uses). The plateau restart of the signal-unit fit is checked on both sides of its threshold. Invented wells.
"""

from __future__ import annotations

import numpy as np
import pytest
from vzero.errors import StageError
from vzero.plugins.kinetics.flags import Flag
from vzero.plugins.kinetics.simulate import simulate_plate
from vzero.plugins.rates import progress
from vzero.plugins.rates.progress import LMFit, progress_curve

T = np.arange(100) * 6.0  # s
SPC = 4.0  # AU/mM (invented)
KM, VMAX = 0.4, 5e-4  # mM, mM/s
S0 = np.array([0.2, 0.4, 1.0, 3.0])  # mM: 30-75 % converted at the low end, a few % at the top


def _plate(noise: float, seed: int = 51) -> np.ndarray:
    return simulate_plate(T, S0, KM, VMAX, signal_per_conc=SPC, baseline=0.1, noise=noise, seed=seed).signal


def test_noiseless_curves_give_back_v0_km_and_vmax_with_known_s0() -> None:
    y = _plate(0.0) + np.tile([1e-6, -1e-6], 50)  # a trace of read noise, so that the screen sees a curve
    r = progress_curve(T, y, s0=S0, signal_per_conc=SPC)
    np.testing.assert_allclose(r.v0, SPC * VMAX * S0 / (KM + S0), rtol=1e-4)  # Michaelis–Menten at S0
    np.testing.assert_allclose(r.extra["km"][:3], KM, rtol=1e-3)  # the top well barely bends
    np.testing.assert_allclose(r.extra["vmax"][:3], VMAX, rtol=1e-3)
    np.testing.assert_allclose(r.extra["s0_fit"], S0)  # known S0 is reported as given
    assert not (r.flags & Flag.FIT_FAILED).any()


def test_noiseless_curves_in_signal_units_give_back_v0_and_the_amplitude() -> None:
    # without S0 the amplitude A (signal change at full conversion) is fitted: SPC S0 on the wells that bend
    y = _plate(0.0) + np.tile([1e-6, -1e-6], 50)
    r = progress_curve(T, y)
    np.testing.assert_allclose(r.v0, SPC * VMAX * S0 / (KM + S0), rtol=1e-3)
    np.testing.assert_allclose(r.extra["s0_fit"][:2], SPC * S0[:2], rtol=1e-3)
    np.testing.assert_allclose(r.extra["km"][:2], SPC * KM, rtol=1e-3)  # Km in signal units too
    np.testing.assert_allclose(r.extra["vmax"][:2], SPC * VMAX, rtol=1e-3)


def test_a_falling_signal_gives_a_negative_rate() -> None:
    y = 2.0 - _plate(0.0) + np.tile([1e-6, -1e-6], 50)
    r = progress_curve(T, y)
    np.testing.assert_allclose(r.v0, -SPC * VMAX * S0 / (KM + S0), rtol=1e-3)


def test_window_reads_goodness_and_noise_ratio_by_hand() -> None:
    y = _plate(0.003)
    y[0, :3] = np.nan  # the first well starts late, the second ends early
    y[1, -5:] = np.nan
    y[2, 40] = np.nan
    r = progress_curve(T, y, s0=S0, signal_per_conc=SPC)
    assert r.window_start_s.tolist() == [T[3], T[0], T[0], T[0]]
    assert r.window_end_s.tolist() == [T[-1], T[-6], T[-1], T[-1]]
    assert r.n_points.tolist() == [97, 95, 99, 100]
    # goodness 1 - RSS/TSS and the residual RMS (n - 3 degrees of freedom) over the read noise, from the
    # fitted curve: the closed form of the module at the reported Km and Vmax (checked against solve_ivp in
    # the first test), residuals summed here
    s_left = progress.integrated_mm(T[None, :], S0[:, None], r.extra["km"][:, None], r.extra["vmax"][:, None])
    curve = SPC * (S0[:, None] - s_left)
    resid = y - curve
    resid -= np.nanmean(resid, axis=1, keepdims=True)  # the fitted baseline is the mean offset
    rss = np.nansum(resid**2, axis=1)
    tss = np.nansum((y - np.nanmean(y, axis=1, keepdims=True)) ** 2, axis=1)
    np.testing.assert_allclose(r.goodness, 1.0 - rss / tss, rtol=1e-6)
    rmse = np.sqrt(rss / (r.n_points - 3))
    np.testing.assert_allclose(r.extra["rmse_over_noise"], rmse / r.extra["read_noise"], rtol=1e-5)
    assert (np.abs(r.extra["rmse_over_noise"] - 1.0) < 0.3).all()  # the model is right: residuals are noise


def test_fit_failed_beyond_the_fail_ratio_and_not_at_it() -> None:
    # the module text: FIT_FAILED where the residual RMS exceeds fail_ratio read noises; the same reads
    # judged with fail_ratio just below and just above the well's ratio
    y = _plate(0.003)
    ratio = progress_curve(T, y, s0=S0, signal_per_conc=SPC).extra["rmse_over_noise"]
    below = progress_curve(T, y, s0=S0, signal_per_conc=SPC, fail_ratio=float(ratio[2]) * 0.999)
    above = progress_curve(T, y, s0=S0, signal_per_conc=SPC, fail_ratio=float(ratio[2]) * 1.001)
    assert below.flags[2] & Flag.FIT_FAILED and np.isnan(below.v0[2])
    assert not above.flags[2] & Flag.FIT_FAILED and np.isfinite(above.v0[2])
    np.testing.assert_array_equal((below.flags & Flag.FIT_FAILED) != 0, ratio > ratio[2] * 0.999)


def test_a_wrong_shape_fails_the_default_ratio_of_three() -> None:
    # a sigmoid (a lag then a fast rise) is not a Michaelis–Menten curve: residuals far above 3 read noises
    rng = np.random.default_rng(52)
    y = 0.1 + 1.0 / (1.0 + np.exp(-(T - 300.0) / 40.0)) + 0.003 * rng.standard_normal(T.size)
    r = progress_curve(T, y[None, :])
    assert r.extra["rmse_over_noise"][0] > 3.0
    assert r.flags[0] & Flag.FIT_FAILED


def test_a_changing_well_without_substrate_fails_and_bad_requests_are_refused() -> None:
    y = _plate(0.003)
    r = progress_curve(T, y, s0=np.array([0.2, 0.0, np.nan, 3.0]), signal_per_conc=SPC)
    assert [bool(f & Flag.FIT_FAILED) for f in r.flags] == [False, True, True, False]
    with pytest.raises(StageError, match="unknown model"):
        progress_curve(T, y, model="cubic")
    with pytest.raises(StageError, match="needs the substrate"):
        progress_curve(T, y, model="power")


def test_the_quick_fit_lands_on_the_same_rates() -> None:
    # quick: block means and a looser stop; within half a standard error of the full fit (the module text:
    # "within a fraction of a standard error of the read-by-read optimum")
    y = _plate(0.003)
    full = progress_curve(T, y, s0=S0, signal_per_conc=SPC)
    quick = progress_curve(T, y, s0=S0, signal_per_conc=SPC, quick=True)
    assert (np.abs(quick.v0 - full.v0) < 0.5 * full.stderr).all()
    np.testing.assert_allclose(quick.v0, SPC * VMAX * S0 / (KM + S0), rtol=0.05)


def test_read_rss_of_the_block_fit_is_the_sum_over_every_read() -> None:
    # fit_coarse_to_fine without the read-by-read step reports the residual sum over every read, taken from
    # the block fit: against the sum of squared residuals of that fit's curve at the reads, by hand
    y = _plate(0.003)
    w = np.ones_like(y)
    s0w = S0[:, None]
    p0 = np.stack([y[:, 0], np.log(SPC * VMAX * S0 / (KM + S0) / SPC), np.full(4, 0.5)], axis=1)
    lo = np.stack([np.full(4, -np.inf), p0[:, 1] - 12, np.full(4, 1e-9)], axis=1)
    hi = np.stack([np.full(4, np.inf), p0[:, 1] + 12, np.full(4, 1 - 1e-9)], axis=1)
    fit = progress.fit_coarse_to_fine(lambda tg: progress._concentration_model(tg, s0w, SPC), T, p0, y, w,
                                      lower=lo, upper=hi, max_iter=80, refine=False, blocks=20)
    curve, _ = progress._concentration_model(T, s0w, SPC)(fit.params, np.arange(4))
    # within the curvature the module text neglects (f'' var(t) per read: here about 0.1 % of the sum); without
    # the within-block slope the sum would be some 30 times too large
    np.testing.assert_allclose(fit.rss, np.sum((y - curve) ** 2, axis=1), rtol=3e-3)
    np.testing.assert_allclose(fit.tss, np.sum((y - y.mean(axis=1, keepdims=True)) ** 2, axis=1), rtol=1e-12)


def test_fit_wells_tss_counts_only_the_counted_reads() -> None:
    y = np.array([[1.0, 2.0, 3.0, 100.0], [4.0, 4.0, 4.0, 4.0]])
    w = np.array([[1.0, 1.0, 1.0, 0.0], [1.0, 1.0, 0.0, 0.0]])
    np.testing.assert_allclose(progress.fit_wells_tss(y, w), [2.0, 0.0])  # (1 + 0 + 1) about the mean 2


# --------------------------------------------------------------------------------- plateau restart


def _straight_start(y: np.ndarray, logit: float) -> tuple[LMFit, progress.Model, np.ndarray, np.ndarray]:
    """A signal-unit fit stuck at logit r = ``logit`` (a straight line, zero order) on curving wells."""
    d = np.ones(y.shape[0])
    model = progress._signal_model(T, d)
    slope = np.polyfit(T[:10], y.T[:10], 1)[0]
    params = np.stack([y[:, 0], np.log(slope), np.log(np.full(y.shape[0], 1e-3)), np.full(y.shape[0], logit)],
                      axis=1)
    fitted, _ = model(params, np.arange(y.shape[0]))
    rss = np.sum((y - fitted) ** 2, axis=1)
    fit = LMFit(params, rss, progress.fit_wells_tss(y, np.ones_like(y)), np.zeros((y.shape[0], 4, 4)),
                np.ones(y.shape[0], bool), 1)
    lo = np.stack([np.full(y.shape[0], -np.inf), params[:, 1] - 12, params[:, 2] - 30, np.full(y.shape[0], -30.0)],
                  axis=1)
    hi = np.stack([np.full(y.shape[0], np.inf), params[:, 1] + 12, params[:, 2] + 20, np.full(y.shape[0], 30.0)],
                  axis=1)
    return fit, model, lo, hi


@pytest.mark.parametrize(("logit", "restarted"), [(8.05, True), (7.95, False)])
def test_wells_on_the_zero_order_plateau_are_fitted_again(logit: float, restarted: bool,
                                                          monkeypatch: pytest.MonkeyPatch) -> None:
    # the module text: a fit that ended beyond logit r = 8 is fitted again from logit r = 2 and keeps the
    # better of the two; below 8 it is left alone
    y = _plate(0.003)[:2]  # the two wells that bend clearly
    fit, model, lo, hi = _straight_start(y, logit)
    starts: list[np.ndarray] = []
    real = progress.fit_wells

    def spy(fun: progress.Model, p0: np.ndarray, *a: object, **k: object) -> LMFit:  # records the restart's start
        starts.append(p0.copy())
        return real(fun, p0, *a, **k)

    monkeypatch.setattr(progress, "fit_wells", spy)
    out = progress._restart_plateaus(model, fit, y, np.ones_like(y), lo, hi, 80)
    if not restarted:
        assert out is fit and not starts
        return
    np.testing.assert_allclose(starts[0][:, -1], 2.0)  # r = 0.88
    assert (out.rss < 0.1 * fit.rss).all()  # the curved fit is far better and is kept
    v0 = np.exp(out.params[:, 1])
    np.testing.assert_allclose(v0, SPC * VMAX * S0[:2] / (KM + S0[:2]), rtol=0.05)
