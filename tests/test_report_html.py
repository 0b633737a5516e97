"""``rollrig report``: one self-contained HTML page per output folder, rendered
in headless Chromium with every image loaded and no console error."""

from __future__ import annotations

import html as html_lib
import json
import re
import shutil
import struct
import subprocess

import pytest
from helpers import MINIMAL_SCENARIO, SCENARIO_DIR
from rollrig.sim.cli.main import main
from rollrig.sim.report import CAUTION
from rollrig.sim.report.html import KINDS, build_page, render_report

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
]
#: The test's watcher: records script errors, failed resources and CSP
#: violations, then after load writes what it saw into the page.
WATCH = """<script>
window.__errs = [];
addEventListener('error', e => __errs.push(
  'error: ' + (e.message || (e.target && (e.target.src || e.target.href)))), true);
addEventListener('securitypolicyviolation', e => __errs.push('blocked: ' + e.blockedURI));
const _err = console.error;
console.error = (...a) => { __errs.push('console: ' + a.join(' ')); _err(...a); };
addEventListener('load', () => {
  const imgs = [...document.images];
  const bad = imgs.filter(i => !(i.complete && i.naturalWidth > 0)).map(i => i.alt);
  const el = document.createElement('pre');
  el.id = 'watch';
  el.textContent = JSON.stringify({images: imgs.length, bad: bad, errors: __errs});
  document.body.appendChild(el);
});
</script>"""


@pytest.fixture(scope="module")
def folders(tmp_path_factory):
    """One folder of each kind the project writes today, plus one of a kind it does not know."""
    root = tmp_path_factory.mktemp("kinds")
    sc = root / "mini.toml"
    sc.write_text(MINIMAL_SCENARIO)
    out = {}
    out["run"] = root / "run"
    assert main(["run", str(sc), "--runs", "3", "--plot", "--out", str(out["run"]), "--format", "csv"]) == 0
    out["margins"] = root / "margins"
    uav = SCENARIO_DIR / "uav-slow-coarse-camera.toml"
    argv = ["margins", str(uav), "--plot", "--no-empirical", "--out", str(out["margins"]), "--format", "csv"]
    assert main(argv) == 0
    out["sweep"] = root / "sweep"
    argv = ["sweep", str(sc), "--set", "sensor.latency_s=0:0.2:3", "--set", "controller.kp=0.3,0.5"]
    assert main([*argv, "--runs", "2", "--out", str(out["sweep"]), "--workers", "1", "--quiet"]) == 0
    # a folder of a kind this version does not know (e.g. one written by a newer command)
    other = out["future"] = root / "future"
    other.mkdir()
    (other / "manifest.json").write_text(json.dumps({"tool": "rollrig", "kind": "tune", "title": "gains"}))
    (other / "candidates.csv").write_text("kp,ki_per_s,cost\n0.3,0.05,1.5\n0.4,0.05,1.2\n")
    (other / "best.json").write_text(json.dumps({"kp": 0.4, "ki_per_s": 0.05}))
    shutil.copy(out["run"] / "bank.png", other / "cost.png")
    return out


def test_each_kind_has_its_tables_figures_scenario_manifest_and_caution(folders):
    for kind, folder in folders.items():
        page = build_page(folder)
        assert page["kind"] == kind if kind != "future" else page["kind"] == "tune"
        assert page["known_kind"] == (kind in KINDS)
        html = render_report(folder)
        assert CAUTION in html and "<table" in html and "data:image/png;base64," in html
        assert "Manifest" in html
        n_png = len(list(folder.glob("*.png")))
        assert html.count("<img ") == n_png >= 1
        # self-contained: no script, and nothing fetched from anywhere but data: URIs
        assert "<script" not in html
        assert re.search(r'\b(src|href)="(?!data:|#)', html) is None
    assert "[controller]" in render_report(folders["sweep"])  # the scenario text itself
    assert "[controller]" in render_report(folders["run"])  # read back by its path, hash checked
    assert "unchanged since the run" in render_report(folders["run"])
    assert "candidates.csv" in render_report(folders["future"])


def test_html_escapes_what_it_shows(tmp_path):
    (tmp_path / "manifest.json").write_text(json.dumps({"kind": "odd", "title": "<b>x</b>"}))
    (tmp_path / "t.csv").write_text("a,b\n<script>alert(1)</script>,2\n")
    html = render_report(tmp_path)
    assert "<script>alert" not in html and "&lt;script&gt;alert" in html


def test_bad_folder_is_one_line_exit_2(tmp_path, capsys):
    assert main(["report", str(tmp_path / "nope")]) == 2
    (tmp_path / "empty").mkdir()
    assert main(["report", str(tmp_path / "empty")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 2 and "no such folder" in err and "empty folder" in err


def _chromium(*args: str, profile) -> subprocess.CompletedProcess:
    return subprocess.run(
        [CHROMIUM, *FLAGS, f"--user-data-dir={profile}", *args],
        capture_output=True,
        text=True,
        timeout=120,
    )


def _png_size(path) -> tuple[int, int]:
    head = path.read_bytes()[:24]
    assert head[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", head[16:24])


@pytest.mark.skipif(CHROMIUM is None, reason="chromium not installed here (.ci/run installs it)")
def test_reports_render_in_headless_chromium(folders, tmp_path):
    for kind, folder in folders.items():
        assert main(["report", str(folder)]) == 0
        page = folder / "report.html"
        html = page.read_text()
        watched = tmp_path / f"{kind}-watched.html"
        csp = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"
        assert csp in html
        watched.write_text(
            html.replace(csp, csp + "; script-src 'unsafe-inline'").replace("<head>", "<head>\n" + WATCH, 1)
        )
        shot = tmp_path / f"{kind}.png"
        res = _chromium(
            "--dump-dom",
            "--virtual-time-budget=5000",
            f"--screenshot={shot}",
            "--window-size=1200,1600",
            watched.as_uri(),
            profile=tmp_path / f"p-{kind}",
        )
        m = re.search(r'<pre id="watch">(.*?)</pre>', res.stdout, flags=re.S)
        assert m, f"{kind}: page did not finish loading: {res.stderr[-500:]}"
        seen = json.loads(html_lib.unescape(m.group(1)))
        assert seen["images"] == len(list(folder.glob("*.png"))) and seen["bad"] == [], (kind, seen)
        assert seen["errors"] == [], (kind, seen)
        assert shot.is_file(), res.stderr[-500:]
        assert _png_size(shot) == (1200, 1600)
        assert shot.stat().st_size > 40_000, f"{kind}: screenshot looks blank"
