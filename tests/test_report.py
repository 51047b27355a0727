"""The HTML report: sections in order, self-contained, escaped, opens in a browser engine.

Outside checks: Python's html.parser reads the document; the rows left out are
counted straight from the CSV with the csv module; chromium (when installed)
parses and lays out the file headless.
"""

from __future__ import annotations

import csv
import os
import pathlib
import re
import shutil
import subprocess
from html import escape
from html.parser import HTMLParser

import pytest

from regbench.analysis.stress import StressConfig
from regbench.data.design import Roles
from regbench.demo import GREENHOUSE_ROLES
from regbench.models.results import FitSettings, model_label
from regbench.report import SECTIONS, render_report, report_html
from regbench.session import Session

ROOT = pathlib.Path(__file__).resolve().parents[1]
CSV = ROOT / "sample_projects" / "greenhouse.csv"
HOSTILE = '<script>alert("x")</script> & <img src="http://example.invalid/p.png">'


class Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.h2, self.tags, self.urls, self.text = [], [], [], []
        self._in_h2 = False
        self.cells_by_table = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        if tag == "h2":
            self._in_h2 = True
            self.h2.append("")
        for k, v in attrs:
            if k in ("src", "href", "xlink:href", "action", "data") and v is not None:
                self.urls.append(v)
            if k == "style" and v and "url(" in v:
                self.urls.append(v)

    def handle_endtag(self, tag):
        if tag == "h2":
            self._in_h2 = False

    def handle_data(self, data):
        if self._in_h2:
            self.h2[-1] += data
        self.text.append(data)


@pytest.fixture(scope="module")
def session():
    s = Session.from_table_file(CSV, Roles.from_dict(GREENHOUSE_ROLES), FitSettings(folds=4, n_penalties=30))
    s.add_stress(StressConfig("day_temp_c", "rescale", 1.8))
    s.add_stress(StressConfig("co2_ppm", "shuffle"))
    s.set_bootstrap(5)
    s.set_notes(HOSTILE)
    s.compute()
    s.add_extra_fit("ridge", 0.3, name='ridge "<b>bold</b>"')
    return s


@pytest.fixture(scope="module")
def html(session, tmp_path_factory):
    path = tmp_path_factory.mktemp("rep") / "report.html"
    render_report(session, path)
    return path.read_text(encoding="utf-8")


def parsed(html) -> Collect:
    p = Collect()
    p.feed(html)
    p.close()
    return p


def test_every_section_heading_in_order(html):
    p = parsed(html)
    assert p.h2 == [h for _, h in SECTIONS]
    assert [h for _, h in SECTIONS][:6] == [
        "What are we asking, and of which rows?", "What overlaps in this table?", "How do the fits differ?",
        "Does any of them fit?", "Do they predict alike?", "What breaks when one input goes bad?"]


def test_self_contained_no_external_url_no_script(html):
    p = parsed(html)
    external = [u for u in p.urls if re.match(r"^\s*(https?:|//|ftp:|file:)", u, re.I)]
    assert external == []
    assert all(u.startswith("#") for u in p.urls)  # only links inside the page
    assert "script" not in p.tags and "link" not in p.tags and "iframe" not in p.tags and "img" not in p.tags
    assert "@import" not in html and "url(" not in html


def test_user_text_is_escaped(html):
    assert "<script>" not in html
    assert "&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt;" in html
    assert "<b>bold</b>" not in html and "&lt;b&gt;bold&lt;/b&gt;" in html
    assert HOSTILE in "".join(parsed(html).text)  # the reader sees the text as typed


def test_every_excluded_row_is_listed(html, session):
    # Rows with an empty cell in a column the roles use, counted with the csv module (row 1 = first data row).
    used = {"yield_kg_m2", "plants_per_bed", "glasshouse", *GREENHOUSE_ROLES["predictors"]}
    with open(CSV, newline="") as fh:
        expected = [i for i, row in enumerate(csv.DictReader(fh), start=1) if any(row[c] == "" for c in used)]
    assert [x.row for x in session.design.excluded] == expected
    section = html.split('id="question"')[1].split("</section>")[0]
    for r in expected:
        assert f"<td class=t>{r}</td>" in section or f"<td>{r}</td>" in section
    assert f"{session.design.n} of the table's 576 rows are used" in section


def test_report_carries_the_numbers_it_claims(html, session):
    text = "".join(parsed(html).text)
    for sa in session.results.ols.set_aside:
        assert sa.sentence() in text
    for s in session.agreement().sentences:
        assert s in text
    for res in session.stress_results():
        for s in res.sentences:
            assert s in text
    for s in session.stability.sentences:
        assert s in text
    assert session.table_hash in text
    import numpy, sklearn, statsmodels

    for v in (numpy.__version__, sklearn.__version__, statsmodels.__version__):
        assert v in text
    assert "Associations are not causes" in text and "held-out groups" in text
    # One penalty figure per penalized family, plus the coefficient bars and the stability bars.
    assert html.count("<svg") >= len(session.results.penalized) + 2


def test_print_css_breaks_pages(html):
    assert "@media print" in html and "break-before: page" in html


def test_unfitted_session_still_renders():
    s = Session.from_table_file(CSV, Roles.from_dict(GREENHOUSE_ROLES))
    p = parsed(report_html(s))
    assert p.h2 == [h for _, h in SECTIONS]


CHROMIUM = "/usr/bin/chromium"


@pytest.mark.skipif(not os.path.exists(CHROMIUM),
                    reason="/usr/bin/chromium is not installed here (CI installs it: apt-get install chromium)")
def test_opens_in_headless_chromium(session, tmp_path):
    path = tmp_path / "report.html"
    render_report(session, path)
    profile = tmp_path / "profile"
    out = subprocess.run(
        [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--no-first-run", f"--user-data-dir={profile}", "--dump-dom", path.as_uri()],
        capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr[-2000:]
    dom = out.stdout
    for _, heading in SECTIONS:
        assert heading in dom.replace("&amp;", "&")
    assert dom.count("<svg") >= 2
    assert "<script>" not in dom


def test_plain_session_without_weights_groups_or_stress_renders(tmp_path):
    s = Session.from_table_file(CSV, Roles(target="yield_kg_m2", predictors=("day_temp_c", "co2_ppm", "variety")),
                                FitSettings(folds=3, n_penalties=15))
    s.set_bootstrap(0)
    s.compute()
    html = report_html(s)
    p = parsed(html)
    assert p.h2 == [h for _, h in SECTIONS]
    text = "".join(p.text)
    assert "No stress test was set up." in text and "No stability check was run" in text
    assert "Held-out error (RMSE) by" not in text
    assert "Row weights" in text and "none (every row counts once)" in text


def test_reproduce_command_refits_the_same_models(session, tmp_path, monkeypatch):
    import shlex

    from regbench.cli import main
    from regbench.project import load_project
    from regbench.report.html import _command

    args = shlex.split(_command(session))
    assert args[:3] == ["regbench", "new", "greenhouse.csv"]
    monkeypatch.chdir(CSV.parent)
    out = tmp_path / "again.regbench"
    args[-1] = str(out)
    args[args.index("--bootstrap") + 1] = "0"
    assert main(args[1:]) == 0
    again = load_project(out, compute=False)
    assert again.settings == session.settings and again.roles == session.roles
    import numpy as np

    for name, pf in session.results.penalized.items():
        np.testing.assert_array_equal(again.results.penalized[name].model.coef, pf.model.coef)


def test_fit_quality_section_lists_each_model_and_groups_in_natural_order(session, html):
    # Group order is natural (2 before 10); test_fit_quality checks that on labels where it matters.
    q = session.fit_quality()
    section = html[html.index('id="quality"'):html.index('id="agreement"')]
    assert q.sentences[0].split(" (")[0] in section
    for name in q.models:
        assert f">{escape(model_label(name))}<" in section  # hostile names arrive escaped
    labels = list(dict.fromkeys(g.group for g in q.groups))
    from regbench.formatting import natural_key

    assert labels == sorted(labels, key=natural_key)
    positions = [section.index(f">{g}<") for g in labels]
    assert positions == sorted(positions)


def test_report_shows_cluster_robust_standard_errors_with_a_group_column(session, html):
    # Reference for the figures themselves: statsmodels OLS cov_type="cluster" (tests/test_weights_kind.py and
    # tests/test_ols.py check the engine's cluster-robust SEs against it); here the report must carry them.
    import numpy as np

    o = session.results.ols
    assert o.cluster_std_errors is not None and o.n_clusters == len(session.design.group_labels)
    section = html.split('id="fits"')[1].split("</section>")[0]
    assert "Cluster-robust SE" in section and f"cluster-robust ones by {session.design.groups_column}" in section
    from regbench.report.html import num

    kept = np.flatnonzero(~o.set_aside_mask)
    for j in kept[:5]:
        assert f"<td>{num(o.cluster_std_errors[j])}</td>" in section and f"<td>{num(o.std_errors[j])}</td>" in section
    assert "Prefer the cluster-robust" in section


def test_report_without_groups_has_classical_standard_errors_only(tmp_path):
    s = Session.from_table_file(CSV, Roles(target="yield_kg_m2", predictors=("day_temp_c", "co2_ppm", "variety")),
                                FitSettings(folds=3, n_penalties=15))
    s.set_bootstrap(0)
    s.compute()
    section = report_html(s).split('id="fits"')[1].split("</section>")[0]
    assert "OLS standard errors" in section and "Cluster-robust SE" not in section
    assert "set a group column" in section


def test_report_flags_a_cv_minimum_at_the_grid_edge(tmp_path):
    import numpy as np
    import pandas as pd

    # Almost noise-free target: the least shrinkage predicts best, so the lowest CV error sits at the grid's
    # smallest α (scikit-learn LassoCV on the same folds agrees, tests/test_wide.py).
    rng = np.random.default_rng(2)
    X = rng.normal(size=(300, 5))
    frame = pd.DataFrame(X, columns=list("abcde")).assign(y=X @ np.arange(1, 6) + 0.01 * rng.normal(size=300))
    path = tmp_path / "edge.csv"
    frame.to_csv(path, index=False)
    s = Session.from_table_file(path, Roles(target="y"), FitSettings(folds=3, n_penalties=20))
    s.set_bootstrap(0)
    s.compute()
    assert s.results.penalized["lasso"].cv.at_edge
    section = report_html(s).split('id="fits"')[1].split("</section>")[0]
    assert "At the edge of the grid" in section and "smallest α tried" in section
