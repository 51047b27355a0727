"""The report draws the window's figure and colours, and its reproduce command refits the same session."""

from __future__ import annotations

import pathlib
import re
import shlex

import pytest

from regbench import cli
from regbench.data.design import Roles
from regbench.demo import GREENHOUSE_ROLES
from regbench.models.results import FitSettings
from regbench.palette import model_colour
from regbench.report import report_html
from regbench.report.pathfig import FigureData, build_figure, spread
from regbench.session import Session

ROOT = pathlib.Path(__file__).resolve().parents[1]
CSV = ROOT / "sample_projects" / "greenhouse.csv"


@pytest.fixture(scope="module")
def session():
    s = Session.from_table_file(CSV, Roles.from_dict(GREENHOUSE_ROLES), FitSettings(seed=20261201))
    s.set_bootstrap(10)
    s.set_alpha("ridge", 0.5)
    s.compute()
    return s


@pytest.fixture(scope="module")
def html(session):
    return report_html(session)


def test_report_uses_the_window_model_colours(html, session):
    fills = set(re.findall(r'fill="(#[0-9a-f]{6})"', html))
    for name in session.models():
        assert model_colour(name) in fills, name
    # The stability chart gives lasso its own colour, not the first colour of a cycle.
    stab = html.split('id="stability"')[1]
    assert model_colour("lasso") in stab and model_colour("elastic_net") in stab


def test_report_penalty_figure_labels_every_path_at_its_end(html, session):
    fits = html.split('id="fits"')[1].split("</section>")[0]
    for name, pf in session.results.penalized.items():
        assert f'aria-label="{name}: what the penalty does"' in fits
    for col in session.results.columns:
        assert f">{col}</text>" in fits, col
    assert "simplest within 1 SE" in fits and "lowest error" in fits


def test_reproduce_command_carries_the_alpha_set_by_hand(html, session, tmp_path):
    cmd = re.search(r'<pre class="cmd">(.*?)</pre>', html, re.S).group(1)
    assert "--chosen-alpha ridge=0.5" in cmd
    args = shlex.split(cmd.replace("&#x27;", "'").replace("&quot;", '"'))[1:]
    args[1] = str(CSV)
    args[args.index("-o") + 1] = str(tmp_path / "again.regbench")
    args[args.index("--bootstrap") + 1] = "0"
    assert cli.main(args) == 0
    from regbench.project import load_project

    again = load_project(str(tmp_path / "again.regbench"))
    assert again.chosen_alpha == {"ridge": 0.5}
    assert again.models()["ridge"].coef == pytest.approx(session.models()["ridge"].coef, rel=1e-9, abs=1e-12)


def test_chosen_alpha_option_refuses_bad_text(tmp_path, capsys):
    rc = cli.main(["new", str(CSV), "--target", "yield_kg_m2", "--chosen-alpha", "ridge", "--bootstrap", "0",
                   "-o", str(tmp_path / "x.regbench")])
    assert rc == 2 and "MODEL=ALPHA" in capsys.readouterr().err


def test_end_labels_never_overlap_and_keep_their_order():
    ys = [10.0, 11.0, 11.5, 40.0, 41.0, 90.0]
    out = spread(ys, 0.0, 100.0, gap=13.0)
    order = sorted(range(len(ys)), key=lambda i: ys[i])
    placed = [out[i] for i in order]
    assert all(b - a >= 13.0 - 1e-9 for a, b in zip(placed, placed[1:]))
    assert all(0.0 <= y <= 100.0 for y in out)


def test_figure_handle_maps_pixels_to_alpha_and_back(session):
    pf = session.results.penalized["lasso"]
    fig = build_figure(FigureData(alphas=pf.path.alphas, coef=pf.path.coef_std, columns=pf.path.columns,
                                  alpha=float(pf.alpha)), 900, 500)
    assert fig.alpha_at(fig.handle_x) == pytest.approx(pf.alpha, rel=1e-9)
    # Stronger penalties to the left: the largest α of the grid sits left of the smallest.
    assert fig.x_of(float(pf.path.alphas.max())) < fig.x_of(float(pf.path.alphas.min()))


def test_twenty_paths_are_all_labelled_without_a_legend():
    import numpy as np

    rng = np.random.default_rng(4)
    alphas = np.logspace(1, -3, 60)
    cols = [f"sensor_{j:02d}" for j in range(20)]
    coef = np.outer(1 - np.exp(-1 / alphas), rng.normal(size=20))
    fig = build_figure(FigureData(alphas=alphas, coef=coef, columns=cols, alpha=0.1), 1100, 620)
    assert set(fig.labels) == set(cols)
    boxes = sorted(fig.labels.values(), key=lambda b: b[1])
    assert all(b[1] - a[1] >= 13.0 - 1e-6 for a, b in zip(boxes, boxes[1:]))   # no two labels overlap
