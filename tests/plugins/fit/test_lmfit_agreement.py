"""lmfit (an independent least-squares fitter, MINPACK Levenberg-Marquardt with finite differences) agrees with
our engine on simulated inhibition data: global fits across a substrate x inhibitor matrix."""

from __future__ import annotations

import numpy as np
import pytest
from vzero.plugins.fit import engine
from vzero.plugins.fit.catalog import BY_NAME

lmfit = pytest.importorskip("lmfit")


def _matrix(truth: dict[str, float], model: str, seed: int) -> tuple[dict[str, np.ndarray], np.ndarray]:
    # invented data: 6 substrate x 4 inhibitor levels, duplicates, noise SD 2 % of Vmax
    s, i = np.meshgrid([1, 2, 5, 10, 20, 50.0], [0, 1, 3, 10.0])
    x = {"substrate": np.repeat(s.ravel(), 2), "inhibitor": np.repeat(i.ravel(), 2)}
    m = BY_NAME[model]
    v = m.evaluate([truth[p] for p in m.params], x)
    rng = np.random.default_rng(seed)
    return x, v + 0.02 * truth["Vmax"] * rng.standard_normal(v.size)


@pytest.mark.parametrize(("model", "truth"), [
    ("competitive", {"Vmax": 10.0, "Km": 4.0, "Kic": 2.0}),
    ("mixed", {"Vmax": 10.0, "Km": 4.0, "Kic": 2.0, "Kiu": 6.0}),
])
def test_engine_agrees_with_lmfit(model: str, truth: dict[str, float]) -> None:
    m = BY_NAME[model]
    x, y = _matrix(truth, model, seed=11)
    ours = engine.fit(m.evaluate, m.jacobian, x, y, m.start(x, y), m.params, bounds=m.bounds)

    params = lmfit.Parameters()
    for name, start in zip(m.params, m.start(x, y), strict=True):
        params.add(name.replace(".", "_"), value=start, min=0)

    def residual(p):
        return m.evaluate([p[n.replace(".", "_")].value for n in m.params], x) - y

    theirs = lmfit.minimize(residual, params, method="leastsq", xtol=1e-14, ftol=1e-14)
    assert ours.success and theirs.success
    for name in m.params:
        p = theirs.params[name.replace(".", "_")]
        # estimates: both reach the same least-squares minimum
        np.testing.assert_allclose(ours.value(name), p.value, rtol=1e-6)
        # standard errors: lmfit scales its covariance by reduced chi-square, as we do; its Jacobian is by
        # finite differences, so agreement is to ~1e-4
        np.testing.assert_allclose(ours.params[name].stderr, p.stderr, rtol=1e-3)
    np.testing.assert_allclose(ours.rss, theirs.chisqr, rtol=1e-9)
    # and the batched path (as the fit stage uses it) gives the same result as the single fit
    batch = engine.fit_batch(m.evaluate, m.jacobian, {k: v[None] for k, v in x.items()}, y[None],
                             np.ones((1, y.size), bool), np.array([m.start(x, y)]), m.params, bounds=m.bounds)[0]
    np.testing.assert_allclose(batch.values, ours.values, rtol=1e-7)
