"""The report page, its figures and the summary files: parsed back and checked against their inputs."""
from __future__ import annotations

import base64
import csv
import io
import json
import math
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from matplotlib.image import imread
from scipy import stats

from wheel_dr.analysis.metrics import Evaluation, evaluate, rank
from wheel_dr.analysis.path import PlanarPath
from wheel_dr.core import JointSamples, Settings, run
from wheel_dr.core.motion import body_increment, integrate
from wheel_dr.report import CAUTION_TEXT, ranking_text, write_report, write_summary
from wheel_dr.report.plots import _ellipse_lines, new_figure
from wheel_dr.report.summary import RANK_COLUMNS

# Demo-scenario geometry ("Quokka" cart; invented numbers, demo only).
RADIUS_M, TRACK_M = 0.0825, 0.412
JOINTS = ("quokka_left_wheel_joint", "quokka_right_wheel_joint")
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"        # PNG specification (ISO/IEC 15948), file signature


def _settings(radius_m: float, k: float = 2e-4) -> Settings:
    return Settings.from_flat({"wheels.left_radius": radius_m, "wheels.right_radius": radius_m,
                               "wheels.track_width": TRACK_M, "noise.k_left": k, "noise.k_right": k,
                               "wheels.left_joints": (JOINTS[0],), "wheels.right_joints": (JOINTS[1],)},
                              base=Settings())


def _drive(seed: int, n: int = 3000, rate_hz: float = 50.0):
    rng = np.random.default_rng(seed)
    t = np.arange(n) / rate_hz
    v = 0.6 + 0.1 * np.sin(0.1 * t)
    w = 0.4 * np.sin(0.13 * t + seed)
    dl = (v - 0.5 * w * TRACK_M) / rate_hz
    dr = (v + 0.5 * w * TRACK_M) / rate_hz
    dl[0] = dr[0] = 0.0
    x, y, th, *_ = integrate(*body_increment(dl, dr, TRACK_M), "exact")
    noisy = np.column_stack([dl + rng.normal(0, 1e-4, n), dr + rng.normal(0, 1e-4, n)])
    stamp = 1_700_000_000_000_000_000 + np.round(t * 1e9).astype(np.int64)
    pos = np.cumsum(noisy, axis=0) / RADIUS_M
    return JointSamples(stamp, JOINTS, pos, np.zeros_like(pos)), PlanarPath(stamp, x, y, th)


@pytest.fixture(scope="module")
def evaluations() -> list[Evaluation]:
    out = []
    for bag in ("vault_round_a", "vault_round_b"):
        samples, truth = _drive(0 if bag.endswith("a") else 1)
        for name, radius in (("nominal", RADIUS_M), ("radius_plus_2pct", RADIUS_M * 1.02)):
            traj = run(samples, _settings(radius))
            traj.slip.slip[1000:1040] = True            # hand-made flags for the timeline
            events = np.array([[traj.stamp_ns[995], traj.stamp_ns[1030]]])
            out.append(evaluate(traj, truth, _settings(radius), events, bag=bag, name=name))
    return out


class _PageParser(HTMLParser):
    """Collects images, section ids, headings and table rows of the page (stdlib html.parser)."""

    def __init__(self) -> None:
        super().__init__()
        self.images: list[str] = []
        self.links: list[str] = []
        self.sections: list[str] = []
        self.headings: list[str] = []
        self.rows: list[list[str]] = []
        self.best_cells: list[tuple[int, int]] = []     # (row index, column index) of bold cells
        self._cell: list[str] | None = None
        self._row: list[str] | None = None
        self._heading: list[str] | None = None

    def handle_starttag(self, tag, attrs) -> None:
        a = dict(attrs)
        if tag == "img":
            self.images.append(a.get("src", ""))
        if tag in ("link", "script") and (a.get("href") or a.get("src")):
            self.links.append(a.get("href") or a.get("src"))
        if tag == "section":
            self.sections.append(a.get("id", ""))
        if tag in ("h2", "h3"):
            self._heading = []
        if tag == "tr":
            self._row = []
        if tag in ("td", "th"):
            self._cell = []
            if a.get("class") == "best":
                self.best_cells.append((len(self.rows), len(self._row or [])))

    def handle_endtag(self, tag) -> None:
        if tag in ("h2", "h3") and self._heading is not None:
            self.headings.append("".join(self._heading).strip())
            self._heading = None
        if tag in ("td", "th") and self._cell is not None and self._row is not None:
            self._row.append("".join(self._cell).strip())
            self._cell = None
        if tag == "tr" and self._row is not None:
            self.rows.append(self._row)
            self._row = None

    def handle_data(self, data) -> None:
        for buf in (self._heading, self._cell):
            if buf is not None:
                buf.append(data)


@pytest.fixture(scope="module")
def page(tmp_path_factory, evaluations) -> Path:
    """The report written once for the page tests, with one extra (calibration-style) section."""
    out = tmp_path_factory.mktemp("report")
    fig = new_figure(3, 2)
    fig.add_subplot(1, 1, 1).plot([0, 1], [1, 0])
    extra = [("Calibration", "<p id='calib-fragment'>calibration results go here</p>", [fig])]
    path = write_report(out, evaluations, extra_sections=extra)
    assert path == out / "index.html"
    return path


def test_page_embeds_every_figure_and_needs_nothing_beside_it(page: Path) -> None:
    """index.html holds its images as base64 PNG data URIs (RFC 2397), each a decodable PNG, and
    refers to no other file, so it works opened from disk."""
    tmp_path = page.parent
    text = page.read_text(encoding="utf-8")
    parser = _PageParser()
    parser.feed(text)
    assert not parser.links
    assert len(parser.images) == 2 * 5 + 1              # five figures per recording, one extra
    for src in parser.images:
        prefix = "data:image/png;base64,"
        assert src.startswith(prefix)
        png = base64.b64decode(src[len(prefix):], validate=True)
        assert png.startswith(PNG_SIGNATURE)
        img = imread(io.BytesIO(png))
        assert img.shape[0] > 50 and img.shape[1] > 50
    assert parser.sections[:4] == ["ranking", "consistency", "bag-1", "bag-2"] and "extra-1" in parser.sections
    assert "Calibration" in parser.headings and "calib-fragment" in text
    assert CAUTION_TEXT.split(".")[0] in text           # the safety caution is shown
    assert sorted(p.name for p in tmp_path.iterdir()) == ["index.html"]   # no temporary file left


def test_caution_is_shown_once_even_when_a_note_repeats_it(tmp_path: Path, evaluations) -> None:
    """The page shows the one safety text (wheel_dr.safety) once, in its box; a note with the same
    words (as the command line passes) is not printed a second time; other notes are."""
    import html as _html
    from wheel_dr.safety import SAFETY_TEXT
    assert CAUTION_TEXT == SAFETY_TEXT
    text = write_report(tmp_path, evaluations[:2], notes=[SAFETY_TEXT, "Demo data: invented."]).read_text("utf-8")
    assert text.count(_html.escape(SAFETY_TEXT)) == 1
    assert "Demo data: invented." in text


def test_settings_are_described_from_each_file(tmp_path: Path, evaluations) -> None:
    """Each settings file is listed with the description its header gives (a '# description:' line,
    else the first comment paragraph, else a sentence saying how to add one), never a fixed text."""
    a = tmp_path / "nominal.yaml"
    a.write_text("# description: Design radii for the Wombat tug.\n#   Second line of it.\n# Other text.\n/**:\n"
                 "  ros__parameters: {}\n", encoding="utf-8")
    b = tmp_path / "radius_plus_2pct.yaml"
    b.write_text("# Radii two per cent over the design,\n# for the comparison.\n\n/**:\n  ros__parameters: {}\n",
                 encoding="utf-8")
    c = tmp_path / "bare.yaml"
    c.write_text("/**:\n  ros__parameters: {}\n", encoding="utf-8")
    out = tmp_path / "page"
    text = write_report(out, evaluations[:2], settings_files=[("nominal", a), ("radius_plus_2pct", b), ("bare", c)]
                        ).read_text("utf-8")
    parser = _PageParser()
    parser.feed(text)
    assert "settings" in parser.sections
    described = {r[0]: r[2] for r in parser.rows if len(r) == 3}
    assert described["nominal"] == "Design radii for the Wombat tug. Second line of it."
    assert described["radius_plus_2pct"] == "Radii two per cent over the design, for the comparison."
    assert "add a '# description: ...' comment line" in described["bare"]


def test_consistency_table_scores_flagged_stretches_apart(page: Path, evaluations) -> None:
    """The consistency table shows, per settings, count, mean, median and share in band for all
    stretches, the unflagged ones and the flagged ones, as the metrics give them."""
    parser = _PageParser()
    parser.feed(page.read_text(encoding="utf-8"))
    rows = [r for r in parser.rows if len(r) == 13 and r[0] in {e.name for e in evaluations}]
    assert len(rows) == len(evaluations)
    by_bag = {}
    for e in rank(evaluations):
        by_bag.setdefault(e.bag, []).append(e)
    for row, e in zip(rows, [e for group in by_bag.values() for e in group]):
        m = e.metrics
        assert row[0] == e.name
        for k, prefix in enumerate(("nees", "nees_unflagged", "nees_flagged")):
            n, mean, median, share = row[1 + 4 * k: 5 + 4 * k]
            assert int(n) == m[f"{prefix}_segments"]
            assert mean.startswith(f"{m[f'{prefix}_mean']:.2f}")
            assert median == f"{m[f'{prefix}_median']:.2f}"
            assert share == f"{m[f'{prefix}_frac_inside_95']:.0%}"
        assert m["nees_flagged_segments"] >= 1            # the hand-made flags fall inside one stretch


def test_extra_section_images_carry_their_own_captions(tmp_path: Path, evaluations) -> None:
    """An extra section's (image, caption) pairs are shown with those captions."""
    fig = new_figure(3, 2)
    fig.add_subplot(1, 1, 1).plot([0, 1], [1, 0])
    text = write_report(tmp_path, evaluations[:2], extra_sections=[("Calibration", "<p>x</p>",
                                                                    [(fig, "Heading error per segment.")])]
                        ).read_text("utf-8")
    assert "<figcaption>Heading error per segment.</figcaption>" in text
    assert "figure 1" not in text


def test_ranking_table_lists_each_recording_best_first(page: Path, evaluations) -> None:
    """The page's ranking rows follow metrics.rank (RPE translation, ascending) within each recording,
    and a 2 % radius error ranks below the true radius."""
    parser = _PageParser()
    parser.feed(page.read_text(encoding="utf-8"))
    body = [r for r in parser.rows if r and r[0].isdigit()]
    assert [r[1] for r in body] == [e.name for e in rank(evaluations)]
    assert [r[1] for r in body] == ["nominal", "radius_plus_2pct"] * 2
    # the RPE column shows the metric rounded as formatted
    rpe_col = 2 + [t for _, t, _ in RANK_COLUMNS].index("RPE %")
    assert float(body[0][rpe_col]) == pytest.approx(rank(evaluations)[0].metrics["rpe_trans_pct"], abs=0.006)
    # the best (lowest) RPE of each recording is bold: the first data row of each table
    first_rows = [i for i, r in enumerate(parser.rows) if r and r[0] == "1"]
    assert all((i, rpe_col) in parser.best_cells for i in first_rows)
    # slip precision is the same for both settings (same hand-made flags): nothing singled out
    p_col = 2 + [t for _, t, _ in RANK_COLUMNS].index("slip P")
    assert not any(c == p_col for _, c in parser.best_cells)


def test_summary_columns_are_the_documented_ones(evaluations) -> None:
    """docs/report.md lists summary.csv's columns in order; they are the columns a real evaluation
    writes (the per-length RPE columns follow)."""
    import re
    doc = (Path(__file__).resolve().parents[1] / "docs" / "report.md").read_text(encoding="utf-8")
    listed = doc[doc.index("## summary.csv columns"):doc.index("then per RPE length L:")]
    names = re.findall(r"[a-z_0-9]+", listed[listed.index("`"):].replace("`", " "))
    row = evaluations[0].summary_row()
    assert names == [k for k in row if not re.match(r"rpe_(trans_pct|rot_degpm|segments)_\d", k)]


def test_summary_files_read_back_equal(tmp_path: Path, evaluations) -> None:
    """summary.csv (csv module) and summary.json read back to the evaluation rows; NaN is an empty
    cell and JSON null (JSON has no NaN, RFC 8259)."""
    csv_path, json_path = write_summary(tmp_path, evaluations, meta={"tool": "wheel_dr"})
    with csv_path.open(newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == len(evaluations)
    for row, ev in zip(rows, evaluations):
        assert row["bag"] == ev.bag and row["settings"] == ev.name
        assert float(row["ate_anchored_rmse_m"]) == ev.metrics["ate_anchored_rmse_m"]
        assert float(row["rpe_trans_pct_5m"]) == ev.rpe_by_length[5.0][0]
    doc = json.loads(json_path.read_text(encoding="utf-8"))
    assert doc["meta"] == {"tool": "wheel_dr"}
    assert doc["rows"][0]["nees_mean"] == evaluations[0].metrics["nees_mean"]
    nan_row = dict(evaluations[0].summary_row(), extra_metric=float("nan"))
    csv_path, json_path = write_summary(tmp_path, [nan_row])
    assert next(csv.DictReader(csv_path.open(newline="")))["extra_metric"] == ""
    assert json.loads(json_path.read_text())["rows"][0]["extra_metric"] is None
    assert sorted(p.name for p in tmp_path.iterdir()) == ["summary.csv", "summary.json"]


def test_a_failed_render_leaves_no_page(tmp_path: Path, evaluations) -> None:
    """Outputs appear only when complete: a render that fails part-way writes nothing."""
    with pytest.raises(TypeError, match="PNG bytes or a matplotlib Figure"):
        write_report(tmp_path, evaluations, extra_sections=[("broken", "", [b"not a png"])])
    assert list(tmp_path.iterdir()) == []


def test_ranking_text_has_a_line_per_settings(evaluations) -> None:
    text = ranking_text(evaluations)
    lines = text.splitlines()
    assert sum(1 for ln in lines if ln.startswith("bag: ")) == 2
    assert sum(1 for ln in lines if ln.strip()[:2] in ("1 ", "2 ")) == 4


def test_covariance_ellipses_sit_at_the_95_percent_mahalanobis_radius() -> None:
    """Every outline point p of a drawn ellipse has (p - m)^T C^-1 (p - m) = chi2(2) 95 % quantile
    (scipy.stats.chi2), i.e. the ellipse holds 95 % of a 2-D Gaussian."""
    rng = np.random.default_rng(5)
    a = rng.normal(size=(6, 2, 2))
    cov = a @ np.swapaxes(a, 1, 2) + 0.01 * np.eye(2)
    x, y = rng.normal(size=6), rng.normal(size=6)
    lines = _ellipse_lines(x, y, cov[:, 0, 0], cov[:, 0, 1], cov[:, 1, 1])
    d = lines - np.stack([x, y], -1)[:, None, :]
    m2 = np.einsum("epi,eij,epj->ep", d, np.linalg.inv(cov), d)
    assert np.allclose(m2, stats.chi2.ppf(0.95, 2), rtol=1e-9)
    assert math.isclose(stats.chi2.ppf(0.95, 2), -2 * math.log(0.05), rel_tol=1e-12)
