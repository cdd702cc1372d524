"""The shareable report (issue 14): built from a folder of outputs, refused when it cannot
be, and rendered in a real headless browser (Debian's chromium, installed by .ci/run)."""

import base64
import contextlib
import io
import json
import os
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from lensdelay.cli.main import main
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import ExternalShear, IsothermalEllipsoid
from lensdelay.model.simulate import simulate_family, to_toml

pytestmark = pytest.mark.integration

MODELS = Path(__file__).parent.parent / "models"
#: Where the browser's screenshot is kept (a test artefact; git ignores it).
ARTIFACTS = Path(os.environ.get("LENSDELAY_TEST_ARTIFACTS", "test-artifacts"))
#: Chromium's flags for a closed machine: no sandbox as root, no GPU, no background
#: connections (common practice for headless runs in containers).
BROWSER_FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--hide-scrollbars",
]


def _scenario(tmp_path):
    """A quad with its faintest image withheld, at δ = −12° (invented: "Tessick")."""
    lens = Lens(
        (
            IsothermalEllipsoid(einstein_radius=1.1, axis_ratio=0.7, position_angle=20.0),
            ExternalShear(strength=0.05, position_angle=-40.0),
        )
    )
    fam = simulate_family(
        lens, 0.03, 0.02, label="sn", redshift=1.6, sigma=0.003, rng=np.random.default_rng(4)
    )
    faintest = max(range(len(fam["image"])), key=lambda k: fam["image"][k]["magnitude"])
    fam["image"].pop(faintest)
    doc = {
        "name": "Tessick <quad> & co",  # characters that must be escaped in the page
        "lens": {"redshift": 0.4},
        "sky": {"ra": 187.3311, "dec": -12.4518},
        "family": [fam],
        "lens_light": {"x": 0, "y": 0, "sigma": 0.01},
        "transient": {"family": "sn", "seen_in": "A", "date": "2026-11-20", "magnitude": 22.0},
        "site": {"latitude": -30.24, "longitude": -70.74, "height": 2700.0},
        "model": "models/sie_shear.toml",
    }
    (tmp_path / "models").mkdir()
    shutil.copy(MODELS / "sie_shear.toml", tmp_path / "models" / "sie_shear.toml")
    path = tmp_path / "tessick.toml"
    path.write_text(to_toml(doc))
    return path


@pytest.fixture(scope="module")
def outputs(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("report")
    path = _scenario(tmp)
    out = tmp / "out"
    quick = ["--samples", "800", "--steps", "150", "--walkers", "16", "--quiet"]
    with contextlib.redirect_stdout(io.StringIO()) as printed:
        assert main(["forecast", str(path), "--out", str(out), "--report", *quick]) == 0
    (tmp / "forecast_stdout.txt").write_text(printed.getvalue())
    assert main(["fit", str(path), "--out", str(out), "--quiet"]) == 0
    return out


def test_forecast_report_is_self_contained(outputs):
    """One file, no external reference: every src/href is a data: URI or an anchor."""
    page = (outputs / "report.html").read_text()
    refs = re.findall(r'(?:src|href)\s*=\s*["\']([^"\']+)', page)
    assert refs and all(r.startswith(("data:", "#")) for r in refs)
    assert "<script" not in page
    assert "Tessick &lt;quad&gt; &amp; co" in page and "<quad>" not in page
    doc = json.loads((outputs / "forecast.json").read_text())
    assert page.count("</tr>") >= len(doc["images"]) + 1
    for im in doc["images"]:
        assert f"{im['family']}/{im['label']}" in page


def test_text_and_html_tables_show_the_same_dates(outputs):
    """Both image tables are drawn from forecast.json's records (report.image_rows): every
    image's median day and 68%/95% windows read the same on the terminal and in the page,
    and the windows are the days that contain the computed ends (common practice: a shown
    window must contain the computed one)."""
    from lensdelay.report.image_rows import image_cells

    page = (outputs / "report.html").read_text()
    printed = (outputs.parent / "forecast_stdout.txt").read_text()
    doc = json.loads((outputs / "forecast.json").read_text())
    for record in doc["images"]:
        c = image_cells(record)
        assert c.window95 == (record["date"]["p2.5"][:10], record["date"]["p97.5"][:10])
        row = next(line for line in printed.splitlines() if line.startswith(c.name + " "))
        assert f"{c.window68[0]}..{c.window68[1]}" in row
        assert f"{c.window95[0]}..{c.window95[1]}" in row and c.median_day in row
        for lo, hi in (c.window68, c.window95):
            assert f"<span class='when'>{lo} –</span> <span class='when'>{hi}</span>" in page
        assert f"<span class='when'>{c.median_day}</span>" in page


def test_report_of_a_folder_holds_every_job(outputs):
    """`lensdelay report DIR` reads forecast.json and fit.json and their figures."""
    target = outputs / "combined.html"
    assert main(["report", str(outputs), "--out", str(target)]) == 0
    page = target.read_text()
    assert "The mass-model fit" in page and "The images: when, where and how bright" in page
    assert page.count("data:image/png;base64,") == len(
        [
            s
            for s in ("sky", "timeline", "budget", "fit_sky", "fit_residuals")
            if (outputs / f"{s}.png").exists()
        ]
    )


@pytest.mark.parametrize(
    "prepare, message",
    [
        (lambda d: None, "must hold forecast.json, fit.json, hubble.json or cosmography.json"),
        (
            lambda d: (d / "forecast.json").write_text(
                json.dumps({"provenance": {"version": "0.0.1"}})
            ),
            "was written by lensdelay 0.0.1",
        ),
        (
            lambda d: (d / "fit.json").write_text(
                json.dumps({"version": __import__("lensdelay.version").version.__version__})
            ),
            "lacks scenario",
        ),
        (lambda d: (d / "hubble.json").write_text("{not json"), "must be readable JSON"),
    ],
)
def test_unusable_folder_is_refused_in_one_line(tmp_path, capsys, prepare, message):
    folder = tmp_path / "results"
    folder.mkdir()
    prepare(folder)
    assert main(["report", str(folder)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and message in err[0]
    assert not (folder / "report.html").exists()


def test_report_needs_an_output_folder(tmp_path, capsys):
    path = _scenario(tmp_path)
    assert main(["forecast", str(path), "--report", "--quiet"]) == 2
    assert "--report needs --out" in capsys.readouterr().err


def _browser() -> str | None:
    return shutil.which("chromium") or shutil.which("chromium-browser")


#: Injected into a copy of the page (the report itself has no script): records errors and
#: console errors from the first moment, then, once everything has loaded, how many
#: images there are and decoded, and the image table's rows.
PROBE_HEAD = (
    "<script>window.__problems=[];"
    "window.addEventListener('error',e=>window.__problems.push('error: '+(e.message||"
    "(e.target&&e.target.tagName)||e.type)),true);"
    "const __ce=console.error;console.error=(...a)=>{window.__problems.push('console: '+"
    "a.join(' '));__ce(...a);};</script>"
)
PROBE_TAIL = (
    "<script>window.addEventListener('load',()=>{const im=[...document.images];"
    "document.body.setAttribute('data-probe',JSON.stringify({images:im.length,"
    "decoded:im.filter(i=>i.complete&&i.naturalWidth>0).length,"
    "rows:document.querySelectorAll('#image-table tbody tr').length,"
    "problems:window.__problems}));});</script>"
)


def test_report_renders_in_a_headless_browser(outputs, tmp_path):
    """The page loads in Chromium with no error, one table row per image, every figure
    decoded; a screenshot is kept in test-artifacts/."""
    browser = _browser()
    if browser is None:
        pytest.skip(
            "Debian's chromium is not installed here (.ci/run installs it with apt-get); "
            "the report was not checked in a browser"
        )
    page = (outputs / "report.html").read_text()
    probed = tmp_path / "probed.html"
    probed.write_text(
        page.replace("<head>", "<head>" + PROBE_HEAD, 1).replace(
            "</body>", PROBE_TAIL + "</body>", 1
        )
    )
    profile = tmp_path / "profile"
    run = subprocess.run(
        [
            browser,
            *BROWSER_FLAGS,
            f"--user-data-dir={profile}",
            "--virtual-time-budget=15000",
            "--enable-logging=stderr",
            "--dump-dom",
            probed.as_uri(),
        ],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert run.returncode == 0, run.stderr[-2000:]
    found = re.search(r'data-probe="([^"]*)"', run.stdout)
    assert found, "the page never finished loading"
    probe = json.loads(found.group(1).replace("&quot;", '"').replace("&amp;", "&"))
    doc = json.loads((outputs / "forecast.json").read_text())
    assert probe["problems"] == []
    assert probe["rows"] == len(doc["images"])
    assert probe["images"] >= 3 and probe["decoded"] == probe["images"]
    assert "Uncaught" not in run.stderr
    # the figures' bytes are PNGs (the browser decoded them; here their signature)
    for data in re.findall(r"data:image/png;base64,([A-Za-z0-9+/=]+)", page):
        assert base64.b64decode(data)[:8] == b"\x89PNG\r\n\x1a\n"

    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    shot = ARTIFACTS / "report-screenshot.png"
    run = subprocess.run(
        [
            browser,
            *BROWSER_FLAGS,
            f"--user-data-dir={profile}",
            "--window-size=1280,2400",
            f"--screenshot={shot.resolve()}",
            (outputs / "report.html").as_uri(),
        ],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert run.returncode == 0 and shot.stat().st_size > 50_000
