"""Figures decode at their size; the report is one self-contained, escaped HTML file."""

from __future__ import annotations

import shutil
import subprocess
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from matplotlib import image
from typer.testing import CliRunner

from fewshot.cli import app
from fewshot.ledger import Ledger
from fewshot.study import load_study

runner = CliRunner()
MARKUP = '<script>alert("x")</script>'


def run(*args: object):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture(scope="module")
def ledger(tmp_path_factory, study_in) -> str:
    folder = tmp_path_factory.mktemp("study")
    narrow = {"name": "narrow", "role": "pretrained", "attributes": {"params": 1e5}}
    path = str(folder / "l.sqlite")
    led = Ledger.open(path)
    study = study_in(
        folder,
        seeds=[0, 1, 2, 3],
        arms={"wide": {"checkpoint": MARKUP}},
        extra_arms=(narrow,),
        second_task=True,
    )
    led.plan(load_study(study))
    rng = np.random.default_rng(0)
    gain = {"wide": 8.0, "narrow": 3.0, "scratch": 1.0}
    for r in led.runs().itertuples():
        led.record(
            r.key,
            "return",
            float(min(100, 12 * np.log(gain[r.arm] * max(r.size, 0.5)) + 25 + rng.normal(0, 3))),
            final=True,
            force=True,
            done=True,
        )
        led.done(r.key)
    led.fail(led.runs().iloc[-1]["key"], "the simulator crashed")
    led.close()
    return path


@pytest.mark.parametrize(
    "kind", ["curves", "aggregate", "difference", "summary", "profile", "scaling"]
)
def test_png_figures_decode(ledger, tmp_path: Path, kind):
    out = tmp_path / f"{kind}.png"
    result = run(
        "plot",
        "--kind",
        kind,
        "--out",
        out,
        "--ledger",
        ledger,
        "--resamples",
        "300",
        "--normalised",
    )
    assert result.exit_code == 0, result.output
    pixels = image.imread(out)  # matplotlib's own PNG reader
    assert pixels.ndim == 3 and pixels.shape[0] > 300 and pixels.shape[1] > 500


def test_curves_png_has_the_size_of_its_figure(ledger, tmp_path: Path):
    from fewshot.analysis import make_figure
    from fewshot.plots import save_figure
    from fewshot.stats import CurveSettings

    led = Ledger.open(ledger)
    fig = make_figure(led, "curves", CurveSettings(resamples=300), normalised=True)
    w, h = fig.get_size_inches()
    save_figure(fig, tmp_path / "c.png", dpi=100)
    pixels = image.imread(tmp_path / "c.png")
    assert pixels.shape[:2] == (round(h * 100), round(w * 100))


@pytest.mark.parametrize("suffix", [".svg", ".pdf"])
def test_svg_and_pdf(ledger, tmp_path: Path, suffix):
    out = tmp_path / f"c{suffix}"
    assert (
        run(
            "plot", "--kind", "curves", "--out", out, "--ledger", ledger, "--resamples", "300"
        ).exit_code
        == 0
    )
    if suffix == ".svg":
        root = ET.parse(out).getroot()  # the standard library's XML parser
        assert root.tag.endswith("svg")
    else:
        assert out.read_bytes().startswith(b"%PDF")


@pytest.mark.parametrize(
    ("args", "fragment"),
    [
        (["--kind", "pie", "--out", "x.png"], "'pie' is not one of"),
        (["--kind", "curves", "--out", "x.gif"], "must end in .png, .svg or .pdf"),
    ],
)
def test_bad_plot_options(ledger, args, fragment):
    result = run("plot", *args, "--ledger", ledger, "--resamples", "300")
    assert result.exit_code == 2 and fragment in result.output


class _Collect(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):  # type: ignore[no-untyped-def]
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):  # type: ignore[no-untyped-def]
        self.text.append(data)


def test_report_is_self_contained_and_escaped(ledger, tmp_path: Path):
    out = tmp_path / "report.html"
    result = run(
        "report",
        "--out",
        out,
        "--ledger",
        ledger,
        "--resamples",
        "300",
        "--title",
        "Dock <i>study</i>",
    )
    assert result.exit_code == 0, result.output
    html_text = out.read_text(encoding="utf-8")
    parser = _Collect()
    parser.feed(html_text)  # the standard library's HTML parser
    text = " ".join(parser.text)
    for name in ("wide", "narrow", "scratch", "reach", "push"):
        assert name in text
    assert "http://" not in html_text and "https://" not in html_text
    assert not [t for t, _ in parser.tags if t in ("script", "link", "iframe")]
    imgs = [a for t, a in parser.tags if t == "img"]
    assert len(imgs) >= 5 and all(a["src"].startswith("data:image/png;base64,") for a in imgs)
    assert MARKUP not in html_text and "&lt;script&gt;" in html_text  # the checkpoint, escaped
    assert "Dock &lt;i&gt;study&lt;/i&gt;" in html_text
    for phrase in (
        "or is safe, where it is deployed",  # the default caution (the study gives none)
        "Methods",
        "seeds stand behind each interval",
        "Warnings",
        "the simulator crashed",
        "1 run(s) failed",
        "effective data",
        "covered the true mean",
    ):
        assert phrase.lower() in html_text.lower(), phrase


@pytest.mark.skipif(
    shutil.which("chromium") is None,
    reason="headless Chromium is not installed (apt-get install chromium)",
)
def test_report_loads_in_headless_chromium(ledger, tmp_path: Path):
    out = tmp_path / "report.html"
    assert run("report", "--out", out, "--ledger", ledger, "--resamples", "300").exit_code == 0
    done = subprocess.run(
        ["chromium", "--headless", "--no-sandbox", "--disable-gpu", "--dump-dom", out.as_uri()],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr[-2000:]
    assert "<h1>Study mini</h1>" in done.stdout and "Transfer against scratch" in done.stdout


def test_report_refuses_a_bad_path(ledger, tmp_path: Path):
    bad = run("report", "--out", tmp_path / "r.txt", "--ledger", ledger, "--resamples", "300")
    assert bad.exit_code == 2 and "--out must end in .html" in bad.output
    missing = run(
        "report", "--out", tmp_path / "no" / "r.html", "--ledger", ledger, "--resamples", "300"
    )
    assert missing.exit_code == 2 and "no such folder" in missing.output
    assert not list(tmp_path.glob("*.html*"))
