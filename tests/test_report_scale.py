"""Large studies stay readable and show their progress (issue 16): figures with one panel per task
in pages by task group, long report tables behind a summary, progress bars on a terminal only,
and the standard error the t interval no longer resamples for unless it is read."""

from __future__ import annotations

import os
import pty
import re
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from fewshot.errors import InvalidInput
from fewshot.ledger import Ledger, ResultLine
from fewshot.plots.layout import panel_pages
from fewshot.stats.bootstrap import bootstrap_cells
from fewshot.study import load_study

ROOT = Path(__file__).resolve().parents[1]


# --------------------------------------------------------------------------- pages of panels


@pytest.mark.parametrize(
    ("tasks", "groups", "want"),
    [
        (5, None, [("", 5)]),  # one page: no label
        (12, {"a": 6, "b": 6}, [("", 12)]),  # one page holds them all, groups or not
        (30, None, [("tasks 1-12 of 30", 12), ("tasks 13-24 of 30", 12), ("tasks 25-30 of 30", 6)]),
        (20, {"a": 8, "b": 12}, [("group a", 8), ("group b", 12)]),
        (
            20,
            {"a": 15, None: 5},
            [
                ("group a, tasks 1-12 of 15", 12),
                ("group a, tasks 13-15 of 15", 3),
                ("ungrouped", 5),
            ],
        ),
    ],
)
def test_panel_pages(tasks, groups, want):
    names = [f"t{k:02d}" for k in range(tasks)]
    of: dict[str, str | None] = {}
    if groups:
        k = 0
        for g, n in groups.items():
            for name in names[k : k + n]:
                of[name] = g
            k += n
    pages = panel_pages(names, of)
    assert [(label, len(page)) for label, page in pages] == want
    assert [t for _, page in pages for t in page] == names  # every task once, in order


def test_panel_pages_refuses_an_empty_page():
    with pytest.raises(InvalidInput, match="`per_page` must be 1 or more"):
        panel_pages(["a"], per_page=0)


# --------------------------------------------------------------------------- a study of 14 tasks


def _line(key: str, value: float) -> ResultLine:
    return ResultLine(key, "return", float(value), None, (), None, None, "call")


def _study(folder: Path, tasks: int) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    rows = ["episode,return"] + [f"ep{k:03d},{k % 17}.5" for k in range(60)]
    (folder / "pool.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    text = [
        'name = "wide-study"',
        'metric = "return"',
        "higher_is_better = true",
        "sizes = [1, 4, 16]",
        "seeds = [0, 1, 2]",
        'baseline = "base"',
        '[[arms]]\nname = "base"\nrole = "baseline"',
        '[[arms]]\nname = "big"\nrole = "pretrained"\nzero_shot = false',
        '[[arms]]\nname = "small"\nrole = "pretrained"\nzero_shot = false',
    ]
    for t in range(tasks):
        text.append(
            f'[[tasks]]\nname = "task{t:02d}"\npool = "pool.csv"\nid_column = "episode"\n'
            f'floor = 0.0\nexpert = 100.0\ngroup = "{"early" if t < 7 else "late"}"'
        )
    (folder / "study.toml").write_text("\n\n".join(text) + "\n", encoding="utf-8")
    return folder / "study.toml"


@pytest.fixture(scope="module")
def wide_ledger(tmp_path_factory) -> tuple[str, dict[str, float]]:
    """14 tasks in two groups, 3 arms, 3 sizes, 3 seeds (378 runs), every run done."""
    folder = tmp_path_factory.mktemp("wide")
    url = str(folder / "l.sqlite")
    led = Ledger.open(url)
    led.plan(load_study(_study(folder, 14)))
    rng = np.random.default_rng(4)
    gain = {"base": 0.0, "big": 12.0, "small": 5.0}
    values = {
        r.key: float(30 + gain[r.arm] + 10 * np.log2(r.size) + rng.normal(0, 4))
        for r in led.runs().itertuples()
    }
    led.record_lines([_line(k, v) for k, v in values.items()], done=True, force=True)
    led.close()
    return url, values


class _Tables(HTMLParser):
    """The report's <details> blocks: how many body rows each one's table holds."""

    def __init__(self) -> None:
        super().__init__()
        self.depth = 0
        self.rows: list[int] = []
        self.summaries: list[str] = []
        self._in_summary = False

    def handle_starttag(self, tag, attrs):  # type: ignore[no-untyped-def]
        if tag == "details":
            self.depth += 1
            self.rows.append(0)
        elif tag == "summary":
            self._in_summary = True
        elif tag == "tr" and self.depth:
            self.rows[-1] += 1

    def handle_endtag(self, tag):  # type: ignore[no-untyped-def]
        if tag == "details":
            self.depth -= 1
        elif tag == "summary":
            self._in_summary = False

    def handle_data(self, data):  # type: ignore[no-untyped-def]
        if self._in_summary:
            self.summaries.append(data)


def test_report_pages_figures_and_collapses_long_tables(wide_ledger, tmp_path, cli):
    url, values = wide_ledger
    out = tmp_path / "report.html"
    res = cli("report", "--ledger", url, "--resamples", "300", "--out", out)
    assert res.exit_code == 0, res.output
    html = out.read_text(encoding="utf-8")
    captions = re.findall(r"<figcaption>([^<]*)</figcaption>", html)
    # 14 tasks > 12 panels a page: one page per task group (7 tasks each)
    assert [c for c in captions if c.startswith("Score against episodes")] == [
        "Score against episodes per task; intervals over seeds (group early).",
        "Score against episodes per task; intervals over seeds (group late).",
    ]
    diff = [c for c in captions if c.startswith("Each arm minus base")]
    assert [c[c.index("(") :] for c in diff] == [
        "(mean over tasks).",
        "(group early).",
        "(group late).",
    ]
    # long tables: the full table behind a summary, every row of it there
    parsed = _Tables()
    parsed.feed(html)
    header = 1
    curve_rows = 3 * 14 * 3  # arms x tasks x sizes
    transfer_rows = 2 * 15 * 3  # two arms x (14 tasks and the mean over tasks) x sizes
    assert parsed.rows[:2] == [curve_rows + header, transfer_rows + header]
    assert (
        parsed.summaries[0]
        == f"Every arm, task and size: all {curve_rows} rows (open to read them)"
    )
    # the curves' summary is the across-task IQM; check big's at n16 against scipy's trim_mean of
    # the 42 normalised runs pooled over tasks (Agarwal et al. 2021: IQM = 25% trimmed mean)
    pooled = [v / 100 for k, v in values.items() if k.startswith("big/") and "/n16/" in k]
    assert len(pooled) == 42
    iqm = stats.trim_mean(pooled, 0.25)
    summary = html[html.index("Summary: the interquartile mean") :]
    row = re.search(r"<td>big</td>(.*?)</tr>", summary).group(1)  # type: ignore[union-attr]
    cells = re.findall(r"<td>([^<]*)</td>", row)
    assert cells[-1].split(" [")[0] == f"{iqm:.3g}"


# --------------------------------------------------------------------------- progress


def _command(args: list[str], *, terminal: bool) -> tuple[int, str]:
    """Run ``fewshot args`` with stderr on a pseudo-terminal (or a pipe); its stderr as text."""
    env = {k: v for k, v in os.environ.items() if k not in ("NO_COLOR", "TTY_COMPATIBLE")}
    env.update(TERM="xterm-256color", COLUMNS="100", PYTHONPATH=str(ROOT))
    cmd = [sys.executable, "-m", "fewshot.cli", *args]
    if not terminal:
        proc = subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env)
        return proc.returncode, proc.stderr.decode()
    master, slave = pty.openpty()
    child = subprocess.Popen(
        cmd, stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=slave, env=env
    )
    os.close(slave)
    chunks = []
    while True:
        try:
            data = os.read(master, 65536)
        except OSError:  # EIO: the child's end of the terminal is closed
            break
        if not data:
            break
        chunks.append(data)
    os.close(master)
    return child.wait(), b"".join(chunks).decode(errors="replace")


@pytest.mark.parametrize(
    ("command", "stage"),
    [
        (["compare", "--format", "json"], "paired differences"),
        (["report", "--out", "{tmp}/r.html"], "report figures"),
    ],
)
def test_progress_on_a_terminal_quiet_when_piped(wide_ledger, tmp_path, command, stage):
    url, _ = wide_ledger
    args = [a.replace("{tmp}", str(tmp_path)) for a in command]
    args += ["--ledger", url, "--resamples", "300"]
    code, shown = _command(args, terminal=True)
    assert code == 0, shown
    assert stage in shown  # the bar's label, drawn on the terminal
    code, piped = _command(args, terminal=False)
    assert code == 0, piped
    assert stage not in piped and "\x1b[" not in piped  # nothing drawn into a pipe


# --------------------------------------------------------------------------- the deferred SE


def test_t_interval_standard_error_read_late_equals_the_resampled_one():
    rng = np.random.default_rng(11)
    x = rng.normal(size=(4, 6))

    def mean(v: np.ndarray) -> np.ndarray:  # over the seeds (the last axis)
        return v.mean(axis=-1)

    lazy = bootstrap_cells(x, mean, method="t", is_mean=True, rng=np.random.default_rng(5))
    full = bootstrap_cells(x, mean, method="percentile", is_mean=True, rng=np.random.default_rng(5))
    # same draws, so the same standard error, bit for bit; and the t interval is the textbook one
    # (scipy.stats.t.interval with the sample's standard error)
    np.testing.assert_array_equal(lazy.se, full.se)
    for row, lo, hi in zip(x, lazy.low, lazy.high, strict=True):
        ref = stats.t.interval(0.95, len(row) - 1, loc=row.mean(), scale=stats.sem(row))
        assert (lo, hi) == pytest.approx(ref, rel=1e-12)
    # the cells after these see the same stream either way
    a, b = np.random.default_rng(5), np.random.default_rng(5)
    bootstrap_cells(x, mean, method="t", is_mean=True, rng=a)
    bootstrap_cells(x, mean, method="percentile", is_mean=True, rng=b)
    assert a.integers(0, 10**9) == b.integers(0, 10**9)
    # and scipy's own bootstrap of the same draws gives that standard error
    ref = stats.bootstrap(
        (x[0],), np.mean, n_resamples=10_000, method="percentile", rng=np.random.default_rng(5)
    )
    assert lazy.se[0] == pytest.approx(ref.standard_error, rel=1e-9)


# --------------------------------------------------------------------------- measured layout


@pytest.mark.parametrize(("n", "scale"), [(1, 1.0), (5, 1.0), (12, 1.0), (12, 1e5), (7, -3e-4)])
def test_grid_layout_keeps_every_label_inside_and_apart(n, scale):
    # matplotlib's own extents of each panel with its labels (Axes.get_tightbbox) are the check:
    # inside the figure, below the legend, and no two panels' extents overlap
    import pandas as pd

    from fewshot.plots import curves_figure

    rows = [
        {
            "arm": a,
            "task": f"task-{t}",
            "size": s,
            "estimate": scale * (s + t + k),
            "low": scale * (s + t + k) - abs(scale),
            "high": scale * (s + t + k) + abs(scale),
            "n_seeds": 3,
        }
        for k, a in enumerate(("base", "wide"))
        for t in range(n)
        for s in (0, 1, 3, 10, 30)
    ]
    fig = curves_figure(
        pd.DataFrame(rows),
        arms=["base", "wide"],
        roles={"base": "baseline"},
        metric="return",
        normalised=False,
    )
    renderer = fig.canvas.get_renderer() if hasattr(fig.canvas, "get_renderer") else None
    if renderer is None:
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        renderer = FigureCanvasAgg(fig).get_renderer()
    width, height = fig.bbox.width, fig.bbox.height
    (legend,) = fig.legends
    legend_bottom = legend.get_window_extent(renderer).y0
    assert legend.get_window_extent(renderer).y1 <= height  # the legend inside the figure too
    boxes = [ax.get_tightbbox(renderer) for ax in fig.axes if ax.get_visible()]
    assert len(boxes) == n
    for box in boxes:
        assert box.x0 >= 0 and box.y0 >= 0 and box.x1 <= width and box.y1 <= legend_bottom
    for i, a in enumerate(boxes):
        for b in boxes[i + 1 :]:
            assert not a.overlaps(b)


def test_report_reuses_its_iqm_for_the_scaling_view(tmp_path, study_file):
    # both arms carry `params`, so the comparison has a scaling view; the report passes its own
    # across-task IQM to it, and the view must be the one compare computes on its own
    from fewshot.analysis import analyse_study, compare_report, read_study
    from fewshot.stats import CurveSettings

    study = study_file(arms={"scratch": {"attributes": {"params": 1e5}}})
    url = str(tmp_path / "l.sqlite")
    led = Ledger.open(url)
    led.plan(load_study(study))
    rng = np.random.default_rng(8)
    values = {
        r.key: float((10 if r.arm == "wide" else 5) * r.size + rng.normal(0, 3))
        for r in led.runs().itertuples()
    }
    led.record_lines([_line(k, v) for k, v in values.items()], done=True, force=True)
    settings = CurveSettings(resamples=500)
    try:
        data = read_study(led, with_status=True)
    finally:
        led.close()
    reused = analyse_study(data, settings).compare
    alone = compare_report(data, settings)
    assert reused is not None and len(reused.scaling) == len(alone.scaling) > 0
    from pandas.testing import assert_frame_equal

    assert_frame_equal(reused.scaling, alone.scaling)
    # the IQM of one task's three seeds is scipy's 25% trimmed mean of them (Agarwal et al. 2021)
    row = alone.scaling[(alone.scaling["arm"] == "wide") & (alone.scaling["size"] == 10)].iloc[0]
    seeds = [values[f"wide/reach/n10/s{s}"] / 100 for s in (0, 1, 2)]
    assert row["estimate"] == pytest.approx(stats.trim_mean(seeds, 0.25), rel=1e-12)


def test_plot_writes_a_page_of_a_many_task_figure_or_every_page_into_a_pdf(
    wide_ledger, tmp_path, cli
):
    url, _ = wide_ledger
    png = tmp_path / "curves.png"
    first = cli("plot", "--ledger", url, "--kind", "curves", "--out", png, "--resamples", "200")
    assert first.exit_code == 0, first.output
    assert "page 1 of 2 (group early)" in " ".join(first.output.split())
    assert png.read_bytes().startswith(b"\x89PNG")
    second = cli(
        "plot", "--ledger", url, "--kind", "curves", "--out", tmp_path / "p2.png", "--page", "2"
    )
    assert second.exit_code == 0 and "page 2 of 2 (group late)" in " ".join(second.output.split())
    # a page the figure does not have: a message, exit 2, nothing written
    bad = cli(
        "plot", "--ledger", url, "--kind", "curves", "--out", tmp_path / "p3.png", "--page", "3"
    )
    assert bad.exit_code == 2 and "--page 3: this figure has 2 pages" in bad.output
    assert not (tmp_path / "p3.png").exists()
    # a PDF holds every page: each page is a /Type /Page object (ISO 32000-1, 7.7.3.3)
    pdf = tmp_path / "curves.pdf"
    every = cli("plot", "--ledger", url, "--kind", "curves", "--out", pdf, "--resamples", "200")
    assert every.exit_code == 0, every.output
    assert len(re.findall(rb"/Type\s*/Page(?![A-Za-z])", pdf.read_bytes())) == 2
    refused = cli("plot", "--ledger", url, "--kind", "curves", "--out", pdf, "--page", "1")
    assert refused.exit_code == 2 and "a .pdf holds every page" in refused.output
    # a one-page figure has no page 2
    one = cli(
        "plot", "--ledger", url, "--kind", "summary", "--out", tmp_path / "s.png", "--page", "2"
    )
    assert one.exit_code == 2 and "this figure has 1 page." in one.output


def test_make_figures_pages_like_panel_pages(wide_ledger):
    import fewshot
    from fewshot.plots.layout import panel_pages

    url, _ = wide_ledger
    led = fewshot.Ledger.open(url)
    try:
        data = fewshot.read_study(led)
    finally:
        led.close()
    settings = fewshot.CurveSettings(resamples=200)
    pages = fewshot.make_figures(data, "curves", settings, per_page=5)
    groups = dict(zip(data.tasks["task"], data.tasks["group"], strict=True))
    want = panel_pages(list(data.tasks["task"]), groups, per_page=5)
    assert [label for label, _ in pages] == [label for label, _ in want]
    assert len(fewshot.make_figures(data, "summary", settings)) == 1
