"""Moving α on the penalty figure lays out only what moves, and gives the figure a full layout gives."""

from __future__ import annotations

import numpy as np

from regbench.report.pathfig import FigureData, build_figure, move_figure


def _data(alpha, readout=None, extras=()):
    # An invented path: 12 columns shrinking to zero as α grows, and a held-out error curve.
    rng = np.random.default_rng(11)
    alphas = np.logspace(1, -3, 50)
    cols = [f"probe_{j:02d}" for j in range(12)]
    coef = np.outer(1 - np.exp(-1 / alphas), rng.normal(size=12))
    mean = 1 + (np.log10(alphas) + 1) ** 2
    cv = (alphas, mean, 0.1 * mean, float(alphas[30]), float(alphas[25]))
    return FigureData(alphas=alphas, coef=coef, columns=cols, alpha=alpha, cv=cv, readout=readout,
                      extras=extras, highlight="probe_03")


def test_a_moved_figure_equals_one_laid_out_afresh_at_the_new_alpha():
    first = _data(0.5)
    fig = build_figure(first, 1000, 560)
    assert 0 < fig.fixed < len(fig.prims)
    readout = [(c, float(v)) for c, v in zip(first.columns, np.linspace(-1, 1, 12))]
    for alpha, ro, extras in ((0.02, None, ()), (3.0, readout, (("lasso 2", 0.2, "#336699"),))):
        d = _data(alpha, ro, extras)
        d.alphas, d.coef, d.cv = first.alphas, first.coef, first.cv
        moved = move_figure(fig, d)
        fresh = build_figure(d, 1000, 560)
        assert moved.prims == fresh.prims
        assert (moved.handle_x, moved.knob) == (fresh.handle_x, fresh.knob)
        assert moved.alpha_at(moved.handle_x) == fresh.alpha_at(fresh.handle_x)
        # The parts α does not move are the very same primitives, not laid out again.
        assert all(a is b for a, b in zip(moved.prims[:fig.fixed], fig.prims[:fig.fixed]))
        fig = moved
