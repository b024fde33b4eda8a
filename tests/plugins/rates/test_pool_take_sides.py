"""Step 9's per-well clauses (plugins/rates/poolshape.py ``pool_shape``, point 4 of its docstring) on both
sides of each threshold, and which wells enter the joint fit (point 2).

The plate: the cooperative enzyme of ``test_poolshape.py`` (every curve by scipy.integrate.solve_ivp, Radau;
Hill 1910, K0.5 0.3 mM, h 2.5) with white read noise. The smooth-misfit statistic is passed in by the caller,
so a fixed statistic per well is given here; the fit's own figures (ratio, v0) are read from a first call
and each threshold is then set just above / just below them by hand. Wells are invented.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy.stats import chi2
from vzero.plugins.rates.poolshape import POOLED_CODES, pool_shape

from tests.plugins.rates.test_poolshape import HILL, S_HILL, SPC, T, hill_rate, plate

N = S_HILL.size
# the thresholds as the module's docstrings state them, written out so that a changed constant is caught: the
# smooth misfit's limit is the 99th percentile of chi² with two degrees of freedom (scipy.stats, independent;
# the product rounds it to 9.21), one well of evidence, three wells in the joint fit (our choice, stated there)
POOL_MISFIT = float(chi2.ppf(0.99, 2))
MIN_EVIDENCE, MIN_WELLS = 1, 3


def _call(misfit: np.ndarray, *, lof: float = np.inf, agree: float = np.inf, q_v0: np.ndarray | None = None,
          code: np.ndarray | None = None, valid: np.ndarray | None = None, min_reads: int = 8,
          rel_se: float = 0.01) -> Any:
    y, v_true = plate(hill_rate, S_HILL, HILL["vmax"], 0.002, 41)
    vmask = np.ones(y.shape, bool) if valid is None else valid

    def fixed(_t: np.ndarray, yy: np.ndarray, *_a: Any) -> np.ndarray:
        return np.array([misfit[int(np.flatnonzero((y == row).all(axis=1))[0])] for row in yy])

    return pool_shape(T, y, vmask, S_HILL, SPC, np.full(N, 0.002), np.full(N, 4.0) if code is None else code,
                      v_true, rel_se * v_true, np.full(N, 0.05), v_true if q_v0 is None else q_v0,
                      np.full(N, 1e-6), lof_ratio=lof, agree_z=agree, min_reads=min_reads, smooth_misfit=fixed)


def test_each_well_clause_on_both_sides() -> None:
    free = _call(np.zeros(N))
    assert free.take.all() and free.code == POOLED_CODES["hill"]
    # lof_ratio between the wells' own residual RMS ratios: the wells at or below it take the shape
    lof = float(np.median(free.ratio))  # one well's own ratio: "within" includes it
    assert 0 < np.sum(free.ratio <= lof) < N
    np.testing.assert_array_equal(_call(np.zeros(N), lof=lof).take, free.ratio <= lof)
    # the smooth misfit just below / just above POOL_MISFIT, alternately
    m = POOL_MISFIT * np.where(np.arange(N) % 2 == 0, 0.999, 1.001)
    np.testing.assert_array_equal(_call(m).take, m <= POOL_MISFIT)
    # the quadratic's v0 set 0.99 or 1.01 agree_z quadratic SEs (1e-6) above or below the pooled v0
    off = np.array([0.99, -0.99, 1.01, -1.01, 0.5, -0.5, 1.2, -1.2, 0.0])
    got = _call(np.zeros(N), agree=2.0, q_v0=free.v0 + off * 2.0 * 1e-6)
    np.testing.assert_array_equal(got.take, np.abs(off) <= 1.0)
    np.testing.assert_allclose(got.v0, free.v0, rtol=1e-12)


def test_which_wells_enter_the_joint_fit() -> None:
    # a well with fewer counted reads than min_reads, or a model outside (0, 1, 2, 4, 5), is left out:
    # no v0 of the joint fit and never taken; a well with exactly min_reads reads is in, and so is a well on
    # each of the models 0 (Michaelis–Menten), 1 (power law), 2 (quadratic) and 5 (substrate inhibition)
    valid = np.ones((N, T.size), bool)
    valid[0, 30:] = False  # 30 reads: exactly min_reads below
    valid[1, 29:] = False  # 29 reads
    code = np.full(N, 4.0)
    code[2] = 3.0
    code[3:7] = [0.0, 1.0, 2.0, 5.0]
    got = _call(np.zeros(N), code=code, valid=valid, min_reads=30)
    assert np.isnan(got.v0[[1, 2]]).all() and not got.take[[1, 2]].any()
    assert np.isfinite(got.v0[[0, 3, 4, 5, 6]]).all() and got.take[[0, 3, 4, 5, 6]].all()


def test_evidence_and_well_count_thresholds() -> None:
    # MIN_EVIDENCE wells must have kept the Hill curve (model 4) and MIN_WELLS wells must be pooled; the rates
    # are given SEs of 10x themselves so that they cannot open the gate on their own (test_pool_rates_gate.py)
    code = np.zeros(N)
    code[:MIN_EVIDENCE] = 4.0
    assert _call(np.zeros(N), code=code, rel_se=10.0).take.any()
    code[:MIN_EVIDENCE] = 0.0
    assert _call(np.zeros(N), code=code, rel_se=10.0).fit is None
    code = np.full(N, 3.0)  # only MIN_WELLS wells poolable: still fitted; one fewer: not
    code[:MIN_WELLS] = 4.0
    assert _call(np.zeros(N), code=code).take[:MIN_WELLS].all()
    code[MIN_WELLS - 1] = 3.0
    assert _call(np.zeros(N), code=code).fit is None


def test_joint_fit_degrees_of_freedom_and_shape_covariance_scaling() -> None:
    # the joint fit has two parameters per well (baseline, ln v0) and two for the shape: dof = reads - 2 n - 2
    # (by hand, with some reads missing); its shape covariance is scaled by the larger of the reduced chi-square
    # and 1, so with the read noise claimed ten times too small it is the read-noise-free covariance times
    # RSS / dof (the linearised least-squares covariance, e.g. Press et al., Numerical Recipes, 15.4), i.e.
    # (claimed-right covariance) * RSS / (dof * sigma²)
    from vzero.plugins.rates.poolshape import fit_pooled

    y, v_true = plate(hill_rate, S_HILL, HILL["vmax"], 0.002, 43)
    valid = np.ones(y.shape, bool)
    valid[2, -7:] = False
    valid[5, :3] = False
    shape0 = np.array([HILL["h"], HILL["k"]])
    right = fit_pooled("hill", T, y, valid, S_HILL, SPC, np.full(N, 0.01), shape0, v_true, np.full(N, 0.05))
    small = fit_pooled("hill", T, y, valid, S_HILL, SPC, np.full(N, 0.0002), shape0, v_true, np.full(N, 0.05))
    dof = valid.sum() - 2 * N - 2
    assert right.dof == dof == small.dof
    np.testing.assert_allclose(small.shape, right.shape, rtol=1e-6)
    # each well's residual RMS over its read noise, two parameters per well (PooledShape's docstring)
    n_reads = valid.sum(axis=1)
    np.testing.assert_allclose(small.ratio, np.sqrt(small.rss / (n_reads - 2)) / 0.0002, rtol=1e-12)
    rss = float(np.sum(small.rss))
    assert rss / dof < 0.01**2  # the generous noise: scale 1
    np.testing.assert_allclose(small.shape_cov, right.shape_cov * rss / (dof * 0.01**2), rtol=1e-4)
