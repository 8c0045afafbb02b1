"""The batch page in a real browser: Debian's chromium, headless.

One test takes a screenshot and checks it is not blank (pixel spread, and enough pixels that are
neither the page background nor white); another lets the page's own script sort the table
(``#sort=frequency``) and reads the DOM chromium produced (``--dump-dom``).

Pages are served over HTTP on 127.0.0.1 with the headers the API sends (Content-Security-Policy
and the rest, ``service.api.security_headers``), on top of the policy each page carries in its
``<meta>``: they must render, sort and show their plots under both, with no policy violation in
chromium's console log; a page with a script or an image the policy does not name must not run
or load it (the control that shows the policy is enforced at all).
The check page and the margin page across variants are screenshot too.
"""

from __future__ import annotations

import http.server
import re
import shutil
import subprocess
import threading
from collections.abc import Iterator
from pathlib import Path
from typing import ClassVar

import numpy as np
import pytest

from service.api.security_headers import security_headers
from service.reports import pages
from service.reports.outcomes import item_from_check
from service.runner import run_check_json
from workers.lumped.families import combined_power_stage, parallel_rlc_negative_g, two_stage_lna

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(CHROMIUM is None, reason="headless Chromium is not installed "
                                                "(Debian: apt-get install chromium)"),
]
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--no-first-run", "--disable-component-update", "--disable-sync",
         "--hide-scrollbars", "--enable-logging=stderr", "--v=0")
VIOLATION = "Content Security Policy"  # in every console message of a blocked script, style …


class _Pages(http.server.BaseHTTPRequestHandler):
    """Serves ``site`` (path → HTML) with the API's headers for text/html."""

    site: ClassVar[dict[str, str]] = {}

    def do_GET(self) -> None:
        body = self.site.get(self.path.split("#", 1)[0])
        if body is None:
            self.send_error(404)
            return
        data = body.encode()
        self.send_response(200)
        self.send_header("Content-Type", "text/html; charset=utf-8")
        self.send_header("Content-Length", str(len(data)))
        for name, value in security_headers("text/html").items():
            self.send_header(name, value)
        self.end_headers()
        self.wfile.write(data)

    def log_message(self, *args: object) -> None:
        pass


@pytest.fixture(scope="module")
def site() -> Iterator[tuple[str, dict[str, str]]]:
    """A local HTTP server: (base URL, the dict of pages it serves, filled by the tests)."""
    pages_by_path: dict[str, str] = {}
    handler = type("Handler", (_Pages,), {"site": pages_by_path})
    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{server.server_address[1]}", pages_by_path
    finally:
        server.shutdown()
        server.server_close()
        thread.join(timeout=10)


def served(site: tuple[str, dict[str, str]], path: str, html: str) -> str:
    base, pages_by_path = site
    pages_by_path[path] = html
    return base + path


def chromium(tmp_path: Path, *args: str) -> subprocess.CompletedProcess:
    profile = tmp_path / "chromium-profile"
    return subprocess.run([CHROMIUM, *FLAGS, f"--user-data-dir={profile}", *args],
                          capture_output=True, text=True, timeout=120, check=False)


def screenshot(tmp_path: Path, url: str, width: int, height: int) -> np.ndarray:
    """The page at ``url`` as Chromium draws it in a width × height window: (height, width, 3)
    in 0…1; no Content-Security-Policy violation on the way."""
    from matplotlib import image

    shot = tmp_path / "shot.png"
    result = chromium(tmp_path, f"--window-size={width},{height}", f"--screenshot={shot}", url)
    assert shot.is_file(), result.stderr[-2000:]
    assert VIOLATION not in result.stderr, result.stderr[-2000:]
    pixels = image.imread(shot)[..., :3]
    assert pixels.shape[:2] == (height, width)
    return pixels


@pytest.fixture(scope="module")
def batch_html() -> str:
    """A batch of tank variants. Closed form (parallel G, L, C): unstable when G = 1/R + g < 0,
    oscillating near 1/(2π√(LC)): with g = −8 mS, L = 2, 1, 0.5 nH give ≈ 2.5, 3.6, 5.0 GHz."""
    items = []
    for tag, l_h, g in (("l05", 0.5e-9, -8e-3), ("l10", 1e-9, -8e-3), ("l20", 2e-9, -8e-3),
                        ("stable", 1e-9, -3e-3)):
        case = parallel_rlc_negative_g(l_h=l_h, g_neg_s=g)
        request = case.check_request(np.geomspace(1e6, 1e12, 401))
        check = {"id": f"chk_{tag}", "label": f"tank {tag}", "status": "done",
                 "verdict": run_check_json(request)}
        items.append(item_from_check(check))
    items.append({"id": "chk_f", "label": "tank broken", "status": "failed", "verdict": None})
    items.append({"id": "chk_q", "label": "tank waiting", "status": "queued", "verdict": None})
    return pages.batch_page({"id": "bat_demo", "label": "tank family"}, items,
                            lambda item: f"checks/{item['id']}.html")


def test_batch_page_screenshot_is_not_blank(tmp_path: Path, batch_html: str, site):
    pixels = screenshot(tmp_path, served(site, "/batch", batch_html), 1200, 900)
    assert float(pixels.std()) > 0.05  # a blank page has no spread
    background = np.array([0xF7, 0xF4, 0xEC]) / 255.0  # the page colour (style.PAPER)
    distinct = np.abs(pixels - background).max(axis=-1) > 0.1
    white = pixels.min(axis=-1) > 0.97
    assert (distinct & ~white).mean() > 0.02  # header strip, tally bar, text, verdict dots


def test_page_script_sorts_by_frequency(tmp_path: Path, batch_html: str, site):
    url = served(site, "/index", batch_html) + "#sort=frequency"
    result = chromium(tmp_path, "--dump-dom", url)
    assert result.returncode == 0, result.stderr[-2000:]
    assert VIOLATION not in result.stderr, result.stderr[-2000:]
    body = result.stdout.split("<tbody>", 1)[1]
    order = re.findall(r'href="checks/([^"]+)\.html"', body)
    # unstable tanks by ascending frequency (largest L first), then the rows without one
    assert order[:3] == ["chk_l20", "chk_l10", "chk_l05"], order
    assert set(order[3:]) == {"chk_stable", "chk_f", "chk_q"}
    default = re.findall(r'href="checks/([^"]+)\.html"', batch_html.split("<tbody>", 1)[1])
    assert default[:3] == ["chk_l05", "chk_l10", "chk_l20"]  # worst verdicts first, then order


@pytest.fixture(scope="module")
def check_html() -> str:
    """The check page of the combined power stage without its drain-to-drain resistor (odd mode
    at +102 MHz ± j2242 MHz by scipy.linalg.eig, workers.lumped.families), every plot embedded."""
    from service.reports.writer import check_plots

    request = combined_power_stage(odd_mode_ohm=None).check_request(np.geomspace(1e6, 1e12, 301))
    check = {"id": "chk_pa", "label": "pa without odd-mode resistor", "status": "done",
             "verdict": run_check_json(request), "attempts": 1}
    pictures = check_plots(request, check["verdict"])
    return pages.check_page(check, pictures.images, device_notes=pictures.device_notes)


def test_check_page_screenshot_shows_tables_and_plots(tmp_path: Path, check_html: str, site):
    """The embedded SVG plots render: the page's lower part (devices and pictures) carries the
    curve colour (style.CURVE, #1f6f8b) in many more pixels than its head (title, facts, modes
    table), where no plot is."""
    url = served(site, "/check", check_html)
    pixels = screenshot(tmp_path, url, 1200, 4000)
    assert float(pixels.std()) > 0.05
    curve = np.array([0x1F, 0x6F, 0x8B]) / 255.0
    near_curve = np.abs(pixels - curve).max(axis=-1) < 0.08
    plotted, head = near_curve[1000:].mean(), near_curve[:600].mean()
    assert plotted > 0.001 and plotted > 20 * head, (plotted, head)
    dom = chromium(tmp_path, "--dump-dom", url).stdout
    assert 'id="devices"' in dom and 'id="plot-device-1"' in dom and 'id="plot-circles"' in dom
    assert "it turns" in dom  # why a device count is missing, in the device table


def test_the_policy_blocks_what_it_does_not_name(tmp_path: Path, batch_html: str, site):
    """Control: the same page with one more inline script (it would retitle the page) and an
    image from elsewhere (port 9, discard: nothing answers) runs neither, and chromium says why;
    the page's own sorting script still runs."""
    tampered = batch_html.replace(
        "</body>", '<script>document.title="ran"</script>'
                   '<img alt="x" src="http://127.0.0.1:9/x.png"></body>')
    url = served(site, "/tampered", tampered) + "#sort=frequency"
    result = chromium(tmp_path, "--dump-dom", url)
    assert "<title>ran</title>" not in result.stdout and "<title>ballast" in result.stdout
    assert 'aria-sort="ascending"' in result.stdout  # the page's own script ran
    assert result.stderr.count(VIOLATION) >= 2, result.stderr[-2000:]


@pytest.fixture(scope="module")
def trend_html() -> str:
    """The margin page of a sweep of the LNA's gate-return damping resistor (workers.lumped
    .families.two_stage_lna; by scipy.linalg.eig the 145 MHz pair grows without the resistor and
    with 10 Ω, and is damped with 100 Ω)."""
    from service.reports.plot_trend import trend_figure
    from service.reports.plots import render
    from service.reports.trend import trend_rows

    items, verdicts = [], {}
    for ohms in (330.0, 100.0, 47.0, 22.0, 10.0, None):
        request = two_stage_lna(gate_return_damping_ohm=ohms).check_request(
            np.geomspace(1e6, 1e11, 301))
        check = {"id": f"chk_{ohms}", "label": f"R={ohms:g}" if ohms else "R=none",
                 "status": "done", "verdict": run_check_json(request)}
        items.append(item_from_check(check))
        verdicts[check["id"]] = check["verdict"]
    rows = trend_rows(items, verdicts, "label")
    return pages.trend_page({"id": "bat_sweep", "label": "gate damping sweep"}, rows,
                            render(trend_figure(rows), "svg"), "label", "margin.html",
                            "margin.csv", "index.html")


def test_margin_page_screenshot_shows_the_variants_in_their_verdict_colours(
        tmp_path: Path, trend_html: str, site):
    """Dots in the stable (#2f7d5b) and the unstable (#c2452d) colour of style.VERDICT_COLOURS
    both show in the picture: the sweep crosses from damped to growing."""
    url = served(site, "/margin", trend_html)
    pixels = screenshot(tmp_path, url, 1200, 900)
    assert float(pixels.std()) > 0.05
    for colour in ("#2f7d5b", "#c2452d"):
        rgb = np.array([int(colour[i:i + 2], 16) for i in (1, 3, 5)]) / 255.0
        assert (np.abs(pixels - rgb).max(axis=-1) < 0.06).sum() > 30, colour
    dom = chromium(tmp_path, "--dump-dom", url).stdout
    assert 'id="plot-trend"' in dom and 'href="margin.csv"' in dom
