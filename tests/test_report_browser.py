"""report.html opened in a real headless Chromium, driven over the DevTools protocol.

The page must load offline, decode every image, show the verdicts and tables,
take keyboard focus sensibly, print, and make no request other than data: URLs.
The websocket client below uses only the standard library (RFC 6455).
"""

from __future__ import annotations

import base64
import hashlib
import json
import os
import re
import shutil
import socket
import struct
import subprocess
import time
import urllib.parse
import urllib.request

import numpy as np
import pytest

import fusion.report as report
from fusion.datamodel import result_dataset

pytestmark = pytest.mark.browser

_GUID = "258EAFA5-E914-47DA-95CA-C5AB0DC85B11"  # RFC 6455, section 1.3


def chromium_binary():
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe is None:
        if os.environ.get("CI"):
            pytest.fail("CI is set but chromium is missing: install Debian's chromium package (.ci/run does)")
        pytest.skip("chromium is not installed (Debian: apt-get install chromium); CI makes this a failure")
    return exe


class DevTools:
    """Minimal DevTools-protocol client over a websocket (text frames, client-masked)."""

    def __init__(self, ws_url, timeout=30.0):
        u = urllib.parse.urlparse(ws_url)
        self.sock = socket.create_connection((u.hostname, u.port), timeout=timeout)
        key = base64.b64encode(os.urandom(16)).decode()
        self.sock.sendall((f"GET {u.path} HTTP/1.1\r\nHost: {u.hostname}:{u.port}\r\nUpgrade: websocket\r\n"
                           f"Connection: Upgrade\r\nSec-WebSocket-Key: {key}\r\nSec-WebSocket-Version: 13\r\n\r\n").encode())
        head = b""
        while b"\r\n\r\n" not in head:
            chunk = self.sock.recv(4096)
            if not chunk:
                raise ConnectionError("DevTools closed the connection during the handshake")
            head += chunk
        head, self.buf = head.split(b"\r\n\r\n", 1)
        lines = head.decode("latin-1").split("\r\n")
        assert " 101 " in lines[0], lines[0]
        accept = base64.b64encode(hashlib.sha1((key + _GUID).encode()).digest()).decode()
        assert any(ln.lower() == f"sec-websocket-accept: {accept}".lower() for ln in lines[1:])
        self.next_id, self.events = 0, []

    def _read(self, n):
        while len(self.buf) < n:
            chunk = self.sock.recv(1 << 16)
            if not chunk:
                raise ConnectionError("DevTools connection closed")
            self.buf += chunk
        out, self.buf = self.buf[:n], self.buf[n:]
        return out

    def _send_frame(self, opcode, payload):
        mask = os.urandom(4)
        n = len(payload)
        if n < 126:
            header = struct.pack("!BB", 0x80 | opcode, 0x80 | n)
        elif n < 1 << 16:
            header = struct.pack("!BBH", 0x80 | opcode, 0x80 | 126, n)
        else:
            header = struct.pack("!BBQ", 0x80 | opcode, 0x80 | 127, n)
        masked = bytes(b ^ mask[i % 4] for i, b in enumerate(payload))
        self.sock.sendall(header + mask + masked)

    def _message(self):
        parts = []
        while True:
            b0, b1 = self._read(2)
            opcode, n = b0 & 0x0F, b1 & 0x7F
            if n == 126:
                (n,) = struct.unpack("!H", self._read(2))
            elif n == 127:
                (n,) = struct.unpack("!Q", self._read(8))
            mask = self._read(4) if b1 & 0x80 else None
            data = self._read(n)
            if mask:
                data = bytes(b ^ mask[i % 4] for i, b in enumerate(data))
            if opcode == 0x9:  # ping
                self._send_frame(0xA, data)
                continue
            if opcode == 0x8:
                raise ConnectionError("DevTools sent close")
            if opcode in (0x1, 0x0):
                parts.append(data)
                if b0 & 0x80:
                    return json.loads(b"".join(parts).decode("utf-8"))

    def call(self, method, **params):
        self.next_id += 1
        my_id = self.next_id
        self._send_frame(0x1, json.dumps({"id": my_id, "method": method, "params": params}).encode())
        while True:
            msg = self._message()
            if msg.get("id") == my_id:
                if "error" in msg:
                    raise RuntimeError(f"{method}: {msg['error']}")
                return msg.get("result", {})
            self.events.append(msg)

    def wait_for(self, method, timeout=30.0):
        deadline = time.monotonic() + timeout
        for i, e in enumerate(self.events):
            if e.get("method") == method:
                return self.events[i]
        while time.monotonic() < deadline:
            msg = self._message()
            self.events.append(msg)
            if msg.get("method") == method:
                return msg
        raise TimeoutError(method)

    def evaluate(self, expression):
        r = self.call("Runtime.evaluate", expression=expression, returnByValue=True, awaitPromise=True)
        if "exceptionDetails" in r:
            raise RuntimeError(r["exceptionDetails"])
        return r["result"].get("value")

    def close(self):
        try:
            self._send_frame(0x8, b"")
        except OSError:
            pass
        self.sock.close()


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    exe = chromium_binary()
    profile = tmp_path_factory.mktemp("chromium-profile")
    proc = subprocess.Popen(
        [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run", "--no-default-browser-check",
         f"--user-data-dir={profile}", "--remote-debugging-address=127.0.0.1", "--remote-debugging-port=0",
         "about:blank"],
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        port_file = profile / "DevToolsActivePort"
        deadline = time.monotonic() + 60
        while not (port_file.exists() and port_file.read_text().count("\n") >= 1):
            if proc.poll() is not None:
                pytest.fail(f"chromium exited with code {proc.returncode} before opening DevTools")
            if time.monotonic() > deadline:
                pytest.fail("chromium did not open its DevTools port within 60 s")
            time.sleep(0.1)
        port = int(port_file.read_text().split()[0])
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=30) as r:
            targets = json.load(r)
        page = next(t for t in targets if t.get("type") == "page")
        dt = DevTools(page["webSocketDebuggerUrl"])
        yield dt
        dt.close()
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=20)


def small_result(name, frequency, code):
    ny, nx = 16, 28
    valid = np.ones((ny, nx), bool)
    valid[6:10, 12:16] = False
    sl = np.full((ny, nx), code, np.int8)
    sl[:, :4] = 3
    sl[~valid] = -1
    field = np.where(valid, -5e-6 * (1 + np.linspace(0, 0.3, nx))[None, :], np.nan)
    maps = {"ratio_measured": field * 1.01, "ratio_measured_std": np.where(valid, 1e-7, np.nan),
            "ratio_surface_ply": field, "ratio_laminate": field * 0.45,
            "residual_surface_ply": field * 0.01, "residual_laminate": field * 0.56,
            "source_layer": sl, "valid": valid.astype(np.int8)}
    return result_dataset(maps, attrs={"run_name": name, "specimen": "B1", "frequency": frequency,
                                       "registration_rms": 0.15, "pixel_size_mm": 0.3})


SOURCES = ("coating", "resin_layer", "surface_ply", "laminate", "model")
# region rows as a run writes them (fusion.run: name, pixels, measured mean and spread, the winning
# category and its share, then each source's predicted mean and mean |z|), five sources
REGIONS = [
    {"name": name, "pixels": n, "measured_mean": -5.123e-6 * k, "measured_std": 3.2e-7, "winner": winner,
     "winner_share": share, **{f"predicted_{s}": -5.0e-6 * k * (1 + 0.3 * i) for i, s in enumerate(SOURCES)},
     **{f"mean_abs_z_{s}": 0.81 + 3 * i for i, s in enumerate(SOURCES)}}
    for k, (name, n, winner, share) in enumerate([("whole field", 412, "resin_layer", 0.9964),
                                                  ("hole edge, upper ligament", 37, "indistinguishable", 0.62),
                                                  ("far field", 120, "no_source_fits", 0.004)], start=1)]


@pytest.fixture(scope="module")
def loaded(browser, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("browser-report")
    runs, datasets = [], {}
    for name, f, code in (("B1-5Hz", 5.0, 100), ("B1-20Hz", 20.0, 2)):
        ds = small_result(name, f, code)
        datasets[name] = ds
        rows = [{"name": "ply 1 (0°)", "z_top": 0.0, "z_bottom": 0.2e-3, "ratio": -5e-6},
                {"name": "ply 2 (90°)", "z_top": 0.2e-3, "z_bottom": 0.4e-3, "ratio": -1e-6}]
        figs = report.run_figures(ds, tmp / name, dpi=50, reference_image=np.random.default_rng(2).random((16, 28)),
                                  region_mask=np.ones((16, 28), bool), ply_profile=rows)
        runs.append({"summary": report.summarize_run(ds, regions=REGIONS if f == 20.0 else None), "figures": figs})
    spec = {"frequency": [5.0, 20.0], "ratio": [-4e-6, -5e-6], "ratio_std": [1e-7, 1e-7],
            "adiabatic": {"surface_ply": -5e-6, "laminate": -2.2e-6}, "band": (10.0, None)}
    camp = report.campaign_figures({"B1": spec}, tmp / "campaign", dpi=50, datasets=datasets)
    path = report.write_report(tmp / "report.html", campaign={"name": "Browser check", "config_sha256": "ab" * 32,
                                                              "version": "0.1.0", "date": "2026-12-01",
                                                              "config_text": "title = 'b'"},
                               runs=runs, campaign_figures=camp)
    browser.call("Network.enable")
    browser.call("Page.enable")
    browser.call("Log.enable")
    browser.call("Runtime.enable")
    browser.events.clear()
    url = path.resolve().as_uri()
    browser.call("Page.navigate", url=url)
    browser.wait_for("Page.loadEventFired", timeout=60)
    return browser, url, runs


def test_every_image_decodes(loaded):
    dt, _, runs = loaded
    images = dt.evaluate("Array.from(document.images).map(i => ({w: i.naturalWidth, h: i.naturalHeight, "
                         "done: i.complete, alt: i.alt}))")
    expected = sum(len(r["figures"]) for r in runs) + 2  # plus the frequency plot and the source-map grid
    assert len(images) == expected
    for im in images:
        assert im["done"] and im["w"] > 0 and im["h"] > 0, im
        assert im["alt"].strip()


def test_verdicts_and_tables_are_on_the_page(loaded):
    dt, _, runs = loaded
    verdicts = dt.evaluate("Array.from(document.querySelectorAll('p.verdict')).map(p => p.textContent)")
    assert verdicts == [r["summary"]["verdict"] for r in runs]
    assert verdicts[1] == "signal from the surface ply in 85 % of the valid area at 20 Hz"  # 4 of 28 columns laminate
    info = dt.evaluate("({tables: document.querySelectorAll('table').length, "
                       "unscoped: Array.from(document.querySelectorAll('th')).filter(t => !t.scope).length, "
                       "cautions: document.getElementById('cautions').innerText, "
                       "title: document.title})")
    assert info["tables"] == 1 + 2 * 2 + 2  # overview + per run (sources, dT/T0) + the regions of one run
    assert info["unscoped"] == 0
    assert "do not certify a component" in info["cautions"] and "qualified engineers" in info["cautions"]
    assert info["title"].startswith("Browser check")


def test_no_network_request_and_no_console_error(loaded):
    dt, url, _ = loaded
    requests = [e["params"]["request"]["url"] for e in dt.events if e.get("method") == "Network.requestWillBeSent"]
    assert url in requests  # the document itself, read from disk
    others = [u for u in requests if u != url and not u.startswith("data:")]
    assert others == []
    # a blocked load (Content-Security-Policy) or a broken image would be logged as an error
    errors = [e["params"]["entry"]["text"] for e in dt.events
              if e.get("method") == "Log.entryAdded" and e["params"]["entry"]["level"] == "error"]
    assert errors == []
    resources = dt.evaluate("performance.getEntriesByType('resource').map(r => r.name)"
                            ".filter(n => !n.startsWith('data:'))")
    assert resources == []


def test_keyboard_focus_starts_at_the_skip_link(loaded):
    dt, _, _ = loaded
    dt.evaluate("document.activeElement && document.activeElement.blur(); window.scrollTo(0, 0); true")
    for kind in ("keyDown", "keyUp"):
        dt.call("Input.dispatchKeyEvent", type=kind, key="Tab", code="Tab", windowsVirtualKeyCode=9)
    focus = dt.evaluate("({cls: document.activeElement.className, href: document.activeElement.getAttribute('href'), "
                        "top: document.activeElement.getBoundingClientRect().top, "
                        "outline: getComputedStyle(document.activeElement).outlineStyle})")
    assert focus["cls"] == "skip-link" and focus["href"] == "#main"
    assert focus["top"] >= 0  # visible once focused
    dt.call("Input.dispatchKeyEvent", type="keyDown", key="Enter", code="Enter", windowsVirtualKeyCode=13, text="\r")
    dt.call("Input.dispatchKeyEvent", type="keyUp", key="Enter", code="Enter", windowsVirtualKeyCode=13)
    assert dt.evaluate("location.hash") == "#main"


def test_print_layout(loaded):
    dt, _, _ = loaded
    dt.call("Emulation.setEmulatedMedia", media="print")
    try:
        state = dt.evaluate("({skip: getComputedStyle(document.querySelector('.skip-link')).display, "
                            "pre: getComputedStyle(document.querySelector('pre.config')).maxHeight, "
                            "overflow: document.documentElement.scrollWidth - document.documentElement.clientWidth})")
        assert state["skip"] == "none" and state["pre"] == "none"
        assert state["overflow"] <= 0  # nothing wider than the page
    finally:
        dt.call("Emulation.setEmulatedMedia", media="")
    pdf = base64.b64decode(dt.call("Page.printToPDF", printBackground=False)["data"])
    assert pdf.startswith(b"%PDF-")
    # the print style sheet starts each run on a new page: header + 2 runs give at least 3 page objects
    # (ISO 32000-1, 7.7.3.3: leaf page objects have /Type /Page)
    assert len(re.findall(rb"/Type\s*/Page(?![a-zA-Z])", pdf)) >= 3


def _regions_state(dt):
    return dt.evaluate("""(() => {
        const wraps = Array.from(document.querySelectorAll('div.table-wrap'))
            .filter(w => /region table|predictions per region/.test(w.getAttribute('aria-label')));
        return {texts: wraps.map(w => w.innerText),
                overflow: wraps.map(w => w.querySelector('table').getBoundingClientRect().width
                                         - w.getBoundingClientRect().width),
                page: document.documentElement.scrollWidth - document.documentElement.clientWidth};
    })()""")


@pytest.mark.parametrize("width", [1280, 800])
def test_region_tables_use_labels_and_percent_and_fit_the_page(loaded, width):
    dt, _, _ = loaded
    dt.call("Emulation.setDeviceMetricsOverride", width=width, height=900, deviceScaleFactor=1, mobile=False)
    try:
        for media in ("", "print"):
            dt.call("Emulation.setEmulatedMedia", media=media)
            state = _regions_state(dt)
            assert len(state["texts"]) == 2
            # no table wider than its box (no hidden columns to scroll to), nothing wider than the page
            assert max(state["overflow"]) <= 0.5, (width, media, state["overflow"])
            assert state["page"] <= 0, (width, media)
    finally:
        dt.call("Emulation.setEmulatedMedia", media="")
        dt.call("Emulation.clearDeviceMetricsOverride")
    text = "\n".join(state["texts"])
    # labels as in the rest of the report, shares in percent (0.9964 -> "> 99 %", 0.004 -> "< 1 %")
    for label in ("resin-rich layer", "indistinguishable", "no source fits", "surface ply", "whole laminate",
                  "heat model at 20 Hz"):
        assert label in text, label
    assert "> 99 %" in text and "62 %" in text and "< 1 %" in text
    for raw in ("resin_layer", "no_source_fits", "0.9964", "winner", "mean_abs_z", "predicted_"):
        assert raw not in text, raw
