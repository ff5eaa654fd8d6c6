"""The page in headless Chromium: choose a CSV, analyse, see the report and the feature table;
run the demo evening with no file; choose a night (EDF), follow its job's progress, see the
night picture and the summary table. The jobs run in a real worker process (``heartsway
worker``) on the site's data folder."""

from __future__ import annotations

import base64
import json
import os
import shutil
import struct
import subprocess
import threading
import time
import urllib.request

import numpy as np
import pytest
from cdp import DevTools
from gunicorn_run import free_port
from jobs_support import NIGHT_S, child_env, start_worker, stop, write_short_night
from werkzeug.serving import make_server

from features.feature_vector import FEATURE_NAMES
from features.night import NIGHT_MEASURES
from schemas.responses import NOTICE
from service import create_app
from service.demo import demo_request_body
from service.job_store import JobSettings
from simulation.night import NightSettings, simulate_night

CHROMIUM = "/usr/bin/chromium"
#: The site's cap on one analysis (HEARTSWAY_MAX_SAMPLES): above the demo evening's 120,000
#: samples (2 min x 250 Hz x 4 channels, service/demo.py), below the 960,000 of the short
#: night (40 min x 100 Hz x 4), so that a night sent as a plain file is too long for it.
SITE_MAX_SAMPLES = 500_000
VIEWPORT = (1400, 1300)

_MISSING = ("headless page test needs Debian's chromium package at /usr/bin/chromium "
            "(apt-get install -y chromium; `make test` installs it when run as root)")
if shutil.which(CHROMIUM) is None and os.environ.get("CI") == "true":
    # In CI a skip would hide a missing install step: fail instead.
    pytest.fail(_MISSING, pytrace=False)
pytestmark = pytest.mark.skipif(shutil.which(CHROMIUM) is None, reason=_MISSING)


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    data = tmp_path_factory.mktemp("site-data")
    app = create_app({"TESTING": True, "HEARTSWAY_MAX_SAMPLES": SITE_MAX_SAMPLES,
                      "HEARTSWAY_JOBS": JobSettings(data_dir=data, lease_s=2.0)})
    port = free_port()
    server = make_server("127.0.0.1", port, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    # A real job worker on the same data folder, as `heartsway worker` runs beside the API.
    worker = start_worker(child_env(data), data / "worker.log")
    yield f"http://127.0.0.1:{port}"
    stop(worker)
    server.shutdown()
    thread.join(timeout=10)
    server.server_close()


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    profile = tmp_path_factory.mktemp("chromium-profile")
    command = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu",
               "--disable-background-networking", "--disable-component-update",
               "--disable-sync", "--no-first-run", "--disable-quic",
               f"--user-data-dir={profile}", "--remote-debugging-port=0",
               f"--window-size={VIEWPORT[0]},{VIEWPORT[1]}", "about:blank"]
    process = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    active = profile / "DevToolsActivePort"
    deadline = time.monotonic() + 30
    while not (active.exists() and len(active.read_text().split()) >= 2):
        if process.poll() is not None or time.monotonic() > deadline:
            process.kill()
            pytest.fail("chromium did not open its DevTools port")
        time.sleep(0.1)
    port = int(active.read_text().split()[0])
    with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=10) as response:
        pages = [t for t in json.load(response) if t["type"] == "page"]
    tools = DevTools(pages[0]["webSocketDebuggerUrl"])
    yield tools
    tools.close()
    process.terminate()
    try:
        process.wait(timeout=15)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait(timeout=10)


def _evaluate(tools, expression):
    return tools.call("Runtime.evaluate", expression=expression,
                      returnByValue=True)["result"].get("value")


def _wait(tools, expression, timeout_s=60.0):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        value = _evaluate(tools, expression)
        if value:
            return value
        time.sleep(0.2)
    status = _evaluate(tools, "document.getElementById('status').textContent")
    pytest.fail(f"timed out waiting for {expression}: status {status!r}")


def _open(browser, site):
    browser.call("Page.enable")
    browser.call("Emulation.setDeviceMetricsOverride", width=VIEWPORT[0], height=VIEWPORT[1],
                 deviceScaleFactor=1, mobile=False)
    browser.call("Page.navigate", url=site + "/")
    _wait(browser, "document.readyState === 'complete' && !!document.getElementById('file')")


def _choose(browser, path):
    document = browser.call("DOM.getDocument")
    node = browser.call("DOM.querySelector", nodeId=document["root"]["nodeId"],
                        selector="#file")["nodeId"]
    browser.call("DOM.setFileInputFiles", files=[str(path)], nodeId=node)
    _wait(browser, "!document.getElementById('analyse').disabled")


def _done(browser):
    state = _wait(browser, "document.body.dataset.state", timeout_s=120.0)
    assert state == "done", _evaluate(browser, "document.getElementById('status').textContent")


def _table(browser, selector):
    return _evaluate(browser, f"Array.from(document.querySelectorAll('{selector} tbody tr'))"
                              ".map(r => Array.from(r.cells).map(c => c.textContent))")


def _shown(browser, element_id):
    """Rendered with a size on the page (not hidden, not collapsed)."""
    return _evaluate(browser, f"(() => {{ const e = document.getElementById('{element_id}'); "
                              "const r = e.getBoundingClientRect(); "
                              "return e.offsetParent !== null && r.width > 0 && r.height > 0; })()")


def test_demo_button_runs_the_demo_evening_without_a_file(site, browser):
    _open(browser, site)
    assert _evaluate(browser, "document.getElementById('analyse').disabled")  # no file chosen
    _evaluate(browser, "document.getElementById('demo').click()")
    _done(browser)
    rows = _table(browser, "#features")
    assert [r[0] for r in rows] == list(FEATURE_NAMES)
    natural = _evaluate(browser, "[document.getElementById('report').naturalWidth, "
                                 "document.getElementById('report').naturalHeight]")
    assert natural == [1100, 850]
    assert " ".join(NOTICE.split()) in _evaluate(
        browser, "document.getElementById('notice').textContent")


def test_night_file_goes_through_a_job_with_progress_picture_and_summary(site, browser,
                                                                        tmp_path):
    path = tmp_path / "night.edf"
    recording = write_short_night(path)  # simulation/night.py: 40 min, 100 Hz, one exit
    _open(browser, site)
    _choose(browser, path)
    _evaluate(browser, "document.getElementById('analyse').click()")
    _done(browser)

    # The progress bar ends full, counting the night's windows: 2400 s / 300 s = 8.
    windows = int(NIGHT_S // 300.0)
    assert _evaluate(browser, "document.getElementById('progress').value") == 1
    assert f"{windows} of {windows} windows" in _evaluate(
        browser, "document.getElementById('progress-text').textContent")
    assert _shown(browser, "job")

    rows = _table(browser, "#night-summary")
    assert [r[0] for r in rows] == [m.name for m in NIGHT_MEASURES]
    for name, value, _, confidence, reason in rows:
        assert 0.0 <= float(confidence) <= 1.0, name  # every value beside its confidence
        assert value != "-" or reason, name  # a null value says why
    by_name = {r[0]: r for r in rows}
    # Acceptance of issue 11 against the simulator's truth: mean heart rate within 1 bpm.
    assert abs(float(by_name["heart_rate_mean_bpm"][1])
               - recording.truth.heart_rate_mean_bpm) <= 1.0
    assert float(by_name["bed_exit_count"][1]) == 1  # the simulated night leaves the bed once
    natural = _evaluate(browser, "[document.getElementById('night-report').naturalWidth, "
                                 "document.getElementById('night-report').naturalHeight]")
    assert natural == [1100, 850]
    assert _shown(browser, "night-report") and _shown(browser, "night-notice")
    assert " ".join(NOTICE.split()) in " ".join(_evaluate(
        browser, "document.getElementById('night-notice').textContent").split())
    assert not _shown(browser, "features")  # the short analysis' table is not left behind
    shot = base64.b64decode(browser.call("Page.captureScreenshot", format="png")["data"])
    (tmp_path / "night-page.png").write_bytes(shot)  # kept for a look when this fails


def test_csv_too_long_for_one_analysis_is_queued_as_a_night(site, browser, tmp_path):
    sim = simulate_night(NightSettings.scaled(NIGHT_S, fs_hz=100.0, seed=1))
    rec = sim.recording
    assert sim.channels.size > SITE_MAX_SAMPLES  # the premise: one analysis refuses it
    path = tmp_path / "night.csv"
    rows = [",".join(rec.labels)]
    rows += [",".join(f"{v:.3f}" for v in row) for row in sim.channels.T]
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    _open(browser, site)
    _evaluate(browser, "document.getElementById('rate').value = '100'; "
                       f"document.getElementById('unit').value = {json.dumps(rec.unit)};")
    _choose(browser, path)
    assert not _evaluate(browser, "document.getElementById('night').checked")
    _evaluate(browser, "document.getElementById('analyse').click()")
    _done(browser)
    windows = int(NIGHT_S // 300.0)
    assert f"{windows} of {windows} windows" in _evaluate(
        browser, "document.getElementById('progress-text').textContent")
    by_name = {r[0]: r for r in _table(browser, "#night-summary")}
    # The simulator's truth again (issue 11's acceptance): mean heart rate within 1 bpm.
    assert abs(float(by_name["heart_rate_mean_bpm"][1])
               - rec.truth.heart_rate_mean_bpm) <= 1.0
    assert _shown(browser, "night-report") and _shown(browser, "night-notice")


def test_drop_a_csv_and_see_the_report_and_features(site, browser, tmp_path):
    body = demo_request_body()
    columns = np.column_stack([c["samples"] for c in body["channels"]])
    csv = tmp_path / "evening.csv"
    lines = [",".join(c["label"] for c in body["channels"])]
    lines += [",".join(f"{v:.3f}" for v in row) for row in columns]
    csv.write_text("\n".join(lines) + "\n", encoding="utf-8")

    browser.call("Page.enable")
    browser.call("Emulation.setDeviceMetricsOverride", width=VIEWPORT[0], height=VIEWPORT[1],
                 deviceScaleFactor=1, mobile=False)
    browser.call("Page.navigate", url=site + "/")
    _wait(browser, "document.readyState === 'complete' && !!document.getElementById('file')")
    document = browser.call("DOM.getDocument")
    node = browser.call("DOM.querySelector", nodeId=document["root"]["nodeId"],
                        selector="#file")["nodeId"]
    browser.call("DOM.setFileInputFiles", files=[str(csv)], nodeId=node)
    _wait(browser, "!document.getElementById('analyse').disabled")
    _evaluate(browser, "document.getElementById('analyse').click()")
    state = _wait(browser, "document.body.dataset.state")
    assert state == "done", _evaluate(browser, "document.getElementById('status').textContent")

    rows = _evaluate(browser, "document.querySelectorAll('#features tbody tr').length")
    assert rows == len(FEATURE_NAMES)
    first = _evaluate(browser, "document.querySelector('#features tbody td').textContent")
    assert first == FEATURE_NAMES[0]
    natural = _evaluate(browser, "[document.getElementById('report').naturalWidth, "
                                 "document.getElementById('report').naturalHeight]")
    assert natural == [1100, 850]

    shot = base64.b64decode(browser.call("Page.captureScreenshot", format="png")["data"])
    (tmp_path / "page.png").write_bytes(shot)
    # PNG IHDR holds width and height (PNG specification, ISO/IEC 15948, 11.2.2).
    assert shot[:8] == b"\x89PNG\r\n\x1a\n"
    assert struct.unpack(">II", shot[16:24]) == VIEWPORT
    import io

    import matplotlib.image

    pixels = matplotlib.image.imread(io.BytesIO(shot), format="png")[..., :3]
    # Not blank: the report and the table put many colours and much ink on the page.
    assert len(np.unique(np.round(pixels.reshape(-1, 3) * 255), axis=0)) > 100
    assert (pixels.mean(axis=2) < 0.8).mean() > 0.05
