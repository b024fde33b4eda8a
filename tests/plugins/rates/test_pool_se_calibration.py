"""Do the standard errors of model-choice's step-9 wells (one rate-law shape per pool) mean what they say?

Step 9 of :func:`vzero.plugins.rates.choice.model_choice` (:mod:`vzero.plugins.rates.poolshape`) fits one
Hill or substrate-inhibition shape over a pool of wells and gives each well that takes it (model 6 or 7) a
v0 whose standard error carries the shape's uncertainty. Here that SE is checked against the scatter of v0
over simulated replicate plates:

* every curve's substrate is integrated by scipy.integrate.solve_ivp (Radau, ``radau_signal`` of
  ``tests/plugins/rates/test_poolshape.py``): the Hill rate law (Hill 1910; h 2.5, K0.5 0.3 mM as the
  project's benchmark Hill plate) and the substrate-inhibition rate law (Haldane 1930; Km 0.3 mM, Ki 3 mM),
  never the closed forms the method fits; each plate adds independent Gaussian read noise (SD 0.002 AU, a
  common plate-reader read noise) to the same noise-free curves;
* each plate is one call of the method (one pool), in two layouts: *single*, one well per substrate level
  (9 wells per pool, as the benchmark plate: the shape least determined), and *quadruplicate*, four wells
  per level (36 per pool);
* only the wells that took the plate's shape (model 6 Hill, 7 substrate inhibition) count.

Per substrate level: ``se_ratio`` = 1 / SD(z), z = (v0 − v0_true)/SE (1 when calibrated), ``rms_ratio`` =
RMS(SE)/SD(v0), ``coverage`` = share of wells whose v0 ± 1.96 SE holds the true v0 (the SE comes from the
read noise, so the normal quantile, as in ``test_se_calibration.py``). Target (the project's standard, as
in ``test_se_calibration.py``): se_ratio within 0.8–1.25 and coverage within 0.93–0.97.

How many wells: the quadruplicate layout has 1000 replicate wells per level (250 plates), of which 80–95 %
take the shape (at least 750 are required), where the coverage's sampling SD is at most 0.008, so a
calibrated SE lands in 0.93–0.97 with at least 98 % probability (binomial); each level is held to both
targets. The single layout gives at least 200 wells per level (the
issue's minimum), where the coverage's sampling SD is 0.015 and a calibrated SE would miss 0.93–0.97 at one
level or another by chance alone; there each level is held to the SE-ratio target (sampling SD about 0.05)
and the coverage target is checked on the levels' wells together. A level that misses is marked
``xfail(strict=True)`` with its figure, so the table in docs/rates.md and this file change together.
Without the shape's term (the shape taken as known) the SE ratio falls to 0.32–0.39 at some levels
(docs/rates.md), which these checks catch. Invented data. Run
``pytest -m slow -s tests/plugins/rates/test_pool_se_calibration.py -k table`` to print the table of
docs/rates.md.
"""

from __future__ import annotations

import functools

import numpy as np
import pytest
from vzero.plugins.rates.choice import model_choice
from vzero.plugins.rates.poolshape import POOLED_CODES

from tests.plugins.rates.test_poolshape import S_HILL, S_SI, SPC, T, hill_rate, radau_signal, si_rate

pytestmark = [pytest.mark.slow, pytest.mark.xdist_group("pool_se_calibration")]

NOISE = 0.002  # AU, read noise (common plate-reader figure)
BASELINE = 0.05  # AU
Z95 = 1.959963984540054  # scipy.stats.norm.ppf(0.975)

#: family -> (rate law, substrate levels (mM))
FAMILIES = {"hill": (hill_rate, S_HILL), "substrate-inhibition": (si_rate, S_SI)}
#: layout -> (wells per level, plates)
LAYOUTS = {"single": (1, 250), "quadruplicate": (4, 250)}
#: plates per call of the method (each its own pool)
BATCH = 50
#: first seed of each (family, layout); plate k uses seed + k
SEEDS = {("hill", "single"): 1000, ("hill", "quadruplicate"): 2000,
         ("substrate-inhibition", "single"): 3000, ("substrate-inhibition", "quadruplicate"): 4000}


@functools.cache
def _curves(family: str) -> tuple[np.ndarray, np.ndarray]:
    """Noise-free reads ``[levels, reads]`` (AU) and true v0 per level (AU/s) of one family (Radau)."""
    rate, s0 = FAMILIES[family]
    vmax = np.full(s0.size, 4e-4 if family == "hill" else 8e-4)
    return BASELINE + radau_signal(rate, s0, vmax), SPC * rate(s0, vmax)  # type: ignore[operator]


@functools.cache
def replicate_wells(family: str, layout: str) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Run the method on every plate of ``(family, layout)``; returns ``v0``, ``se`` (AU/s), ``model``,
    each ``[plates, levels, wells per level]``, and the true v0 per level."""
    s0 = FAMILIES[family][1]
    clean, truth = _curves(family)
    per, n_plates = LAYOUTS[layout]
    rows = np.repeat(np.arange(s0.size), per)  # well -> level, replicates side by side
    out = np.empty((3, n_plates, s0.size, per))
    for first in range(0, n_plates, BATCH):
        # BATCH plates in one call, each plate its own pool (pool_groups, as the rates stage passes a layout's
        # groups): the same v0, SE and model per well as one call per plate (checked: within 4e-10
        # relative, models identical), at a fraction of the calls
        plates = range(first, min(first + BATCH, n_plates))
        y = np.concatenate([clean[rows] + NOISE * np.random.default_rng(SEEDS[(family, layout)] + k)
                            .standard_normal((rows.size, T.size)) for k in plates])
        r = model_choice(T, y, s0=np.tile(s0[rows], len(plates)), signal_per_conc=SPC,
                         pool_groups=np.repeat(np.arange(len(plates)), rows.size))
        for j, a in enumerate((r.v0, r.stderr, r.extra["model"])):
            out[j, first:first + len(plates)] = a.reshape(len(plates), s0.size, per)
    return out[0], out[1], out[2], truth


def calibration(family: str, layout: str, level: int | None) -> dict[str, float]:
    """Wells taken, bias, scatter, SE ratios and 95 % coverage on the wells of one level (None: all levels)
    that took the plate's shape."""
    v0, se, model, truth = replicate_wells(family, layout)
    took = model == POOLED_CODES[family]
    pick = np.zeros(took.shape, bool)
    pick[:, slice(None) if level is None else level] = True
    m = took & pick
    true = np.broadcast_to(truth[None, :, None], v0.shape)[m]
    v, s = v0[m], se[m]
    z = (v - true) / s
    rel = v / true - 1.0
    return {"wells": int(m.sum()), "taken": float(m.sum() / pick.sum()), "bias": float(np.mean(rel)),
            "rel_sd": float(np.std(rel, ddof=1)), "mean_z": float(np.mean(z)),
            "se_ratio": float(1.0 / np.std(z, ddof=1)),
            "rms_ratio": float(np.sqrt(np.mean((s / true) ** 2)) / np.std(rel, ddof=1)),
            "coverage": float(np.mean(np.abs(z) <= Z95))}


def _miss(reason: str) -> pytest.MarkDecorator:
    return pytest.mark.xfail(strict=True, reason=reason)


LEVEL_CASES = [(fam, lay, i) for fam in FAMILIES for lay in LAYOUTS for i in range(FAMILIES[fam][1].size)]


@pytest.mark.parametrize(("family", "layout", "level"), LEVEL_CASES)
def test_step9_standard_error_matches_the_scatter_at_each_level(family: str, layout: str, level: int) -> None:
    c = calibration(family, layout, level)
    per, n_plates = LAYOUTS[layout]
    assert c["wells"] >= 200, c  # the minimum of replicate wells per condition
    assert 0.8 <= c["se_ratio"] <= 1.25, c
    if layout == "quadruplicate":  # 750 wells or more: the coverage pinned to +-0.008 (binomial SD)
        assert per * n_plates >= 1000, c
        assert c["wells"] >= 750, c
        assert 0.93 <= c["coverage"] <= 0.97, c


@pytest.mark.parametrize("family", list(FAMILIES))
def test_step9_coverage_on_single_well_plates(family: str) -> None:
    # the levels' wells together (about 2000): each level's 200-odd wells pin the coverage only to +-0.015
    c = calibration(family, "single", None)
    assert c["wells"] >= 1800, c
    assert 0.93 <= c["coverage"] <= 0.97, c
    assert 0.8 <= c["se_ratio"] <= 1.25, c


def test_print_the_table() -> None:
    cols = "wells | bias | SE ratio (z) | RMS SE / SD | 95 % coverage"
    lines = [f"| family | S0 (mM) | {' | '.join(f'{lay}: {cols}' for lay in LAYOUTS)} |",
             "|---|---|" + "---|" * 5 * len(LAYOUTS)]
    for family, (_, s0) in FAMILIES.items():
        for i in [*range(s0.size), None]:
            cells = []
            for layout in LAYOUTS:
                c = calibration(family, layout, i)
                assert c["wells"] >= 200, c
                assert np.isfinite([c["bias"], c["se_ratio"], c["coverage"]]).all(), c
                cells.append(f"{c['wells']} | {c['bias']:+.2%} | {c['se_ratio']:.2f} | {c['rms_ratio']:.2f} | "
                             f"{c['coverage']:.3f}")
            label = "all" if i is None else f"{s0[i]:g}"
            lines.append(f"| {family} | {label} | {' | '.join(cells)} |")
    print("\n".join(lines))
