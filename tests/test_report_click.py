"""Selecting a design by a real mouse click in the report (issue #18).

A bundled study's report is loaded in headless Chromium; the test finds where one
design's point is drawn in the Ms-against-noise-gain chart, sends a real left click
there through the Chrome DevTools Protocol (``Input.dispatchMouseEvent``: press and
release, as a mouse does), and reads back from the page that the selection took
effect: the chart's own points and the loops in the gain-phase chart of the other
designs fade (opacity 0.15) while the clicked design stays at 1. The CDP client is a
few lines over a plain socket (RFC 6455 framing), so no browser-driver package is
needed.
"""

from __future__ import annotations

import base64
import json
import os
import shutil
import socket
import struct
import subprocess
import tempfile
import time
import urllib.request
from pathlib import Path
from typing import Any

import pytest

from explorer.evaluation.records import given_designs
from explorer.model.study import load_study
from explorer.outputs.report import write_report

ROOT = Path(__file__).resolve().parents[1]
CHROMIUM = shutil.which("chromium") or (
    "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None
)
pytestmark = [
    pytest.mark.slow,
    pytest.mark.skipif(CHROMIUM is None, reason="chromium not installed"),
]


class _Socket:
    """A minimal WebSocket client (RFC 6455): text frames out (masked), frames in."""

    def __init__(self, url: str) -> None:
        assert url.startswith("ws://")
        host_port, _, path = url[5:].partition("/")
        host, _, port = host_port.partition(":")
        self.sock = socket.create_connection((host, int(port)), timeout=30)
        key = base64.b64encode(os.urandom(16)).decode()
        self.sock.sendall(
            f"GET /{path} HTTP/1.1\r\nHost: {host_port}\r\nUpgrade: websocket\r\n"
            f"Connection: Upgrade\r\nSec-WebSocket-Key: {key}\r\n"
            "Sec-WebSocket-Version: 13\r\n\r\n".encode()
        )
        head = b""
        while b"\r\n\r\n" not in head:
            head += self.sock.recv(1)
        assert b" 101 " in head.split(b"\r\n")[0], head
        self.next_id = 0

    def _recv_exact(self, n: int) -> bytes:
        buf = b""
        while len(buf) < n:
            chunk = self.sock.recv(n - len(buf))
            if not chunk:
                raise ConnectionError("DevTools socket closed")
            buf += chunk
        return buf

    def send(self, text: str) -> None:
        data = text.encode()
        head = bytearray([0x81])
        n = len(data)
        if n < 126:
            head.append(0x80 | n)
        elif n < 1 << 16:
            head += bytes([0x80 | 126]) + struct.pack(">H", n)
        else:
            head += bytes([0x80 | 127]) + struct.pack(">Q", n)
        mask = os.urandom(4)
        self.sock.sendall(bytes(head) + mask + bytes(b ^ mask[i % 4] for i, b in enumerate(data)))

    def recv(self) -> str:
        parts = b""
        while True:
            b0, b1 = self._recv_exact(2)
            n = b1 & 0x7F
            if n == 126:
                n = struct.unpack(">H", self._recv_exact(2))[0]
            elif n == 127:
                n = struct.unpack(">Q", self._recv_exact(8))[0]
            payload = self._recv_exact(n)
            if b0 & 0x0F in (0x1, 0x0):
                parts += payload
                if b0 & 0x80:
                    return parts.decode()

    def call(self, method: str, **params: Any) -> dict[str, Any]:
        self.next_id += 1
        mid = self.next_id
        self.send(json.dumps({"id": mid, "method": method, "params": params}))
        while True:
            msg = json.loads(self.recv())
            if msg.get("id") == mid:
                assert "error" not in msg, msg
                return msg["result"]

    def js(self, expr: str) -> Any:
        res = self.call("Runtime.evaluate", expression=expr, returnByValue=True,
                        awaitPromise=True)
        assert "exceptionDetails" not in res, res
        return res["result"].get("value")


#: Page-side helpers: the vega view of a chart slot, and where (screen centre of the
#: SVG element vega drew for it) and how opaque the marks drawing one design are.
_HELPERS = r"""
window.__view = function(key){
  return (window.loopscoutViews || []).find(function(v){
    return v.container() && v.container().id === 'chart-' + key;});
};
window.__items = function(key, name, type){
  var v = window.__view(key), out = [];
  if (!v) return out;
  (function walk(node){
    if (!node) return;
    (node.items || []).forEach(function(it){
      if (node.marktype === type && it.datum && it.datum.name === name && it._svg) {
        var r = it._svg.getBoundingClientRect();
        out.push({x: r.left + r.width / 2, y: r.top + r.height / 2,
                  opacity: it.opacity === undefined ? 1 : it.opacity});
      }
      if (it.items) walk(it);
    });
  })({items: [v.scenegraph().root]});
  return out;
};
window.__hits = function(key, name, type, x, y){
  var v = window.__view(key), e = document.elementFromPoint(x, y), found = false;
  (function walk(node){
    (node.items || []).forEach(function(it){
      if (node.marktype === type && it.datum && it.datum.name === name && it._svg === e)
        found = true;
      if (it.items) walk(it);
    });
  })({items: [v.scenegraph().root]});
  return found;
};
"""


def _start(page: Path, prof: str) -> tuple[subprocess.Popen[bytes], _Socket]:
    proc = subprocess.Popen(
        [str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--proxy-server=127.0.0.1:9", "--host-resolver-rules=MAP * ~NOTFOUND",
         f"--user-data-dir={prof}", "--remote-debugging-port=0", "--window-size=1400,1200",
         page.as_uri()],
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )
    port_file = Path(prof) / "DevToolsActivePort"
    deadline = time.monotonic() + 60
    while not (port_file.exists() and port_file.read_text().strip()):
        assert time.monotonic() < deadline, "chromium did not open its DevTools port"
        assert proc.poll() is None, "chromium exited"
        time.sleep(0.1)
    port = int(port_file.read_text().split()[0])
    opener = urllib.request.build_opener(urllib.request.ProxyHandler({}))  # no proxy
    targets: list[dict[str, Any]] = []
    while not any(t.get("type") == "page" for t in targets):
        assert time.monotonic() < deadline, "no page target"
        targets = json.loads(opener.open(f"http://127.0.0.1:{port}/json", timeout=10).read())
        time.sleep(0.1)
    ws = next(t for t in targets if t["type"] == "page")["webSocketDebuggerUrl"]
    return proc, _Socket(ws)


def test_a_mouse_click_selects_a_design(tmp_path: Path) -> None:
    study = load_study(ROOT / "studies" / "conveyor_speed.toml")
    designs = given_designs(study)
    page = write_report(study, designs, tmp_path / "r.html")
    target = str(designs[1]["name"])  # not the first: a deliberate choice
    others = [str(d["name"]) for d in designs if str(d["name"]) != target]
    with tempfile.TemporaryDirectory(ignore_cleanup_errors=True) as prof:
        proc, cdp = _start(page, prof)
        try:
            deadline = time.monotonic() + 120
            while cdp.js("document.body && document.body.getAttribute('data-rendered')") != "yes":
                assert time.monotonic() < deadline, "the report did not finish drawing"
                time.sleep(0.2)
            assert cdp.js("document.getElementById('errors').textContent") == ""
            cdp.js(_HELPERS)
            cdp.js("document.getElementById('chart-pareto_hf').scrollIntoView({block:'center'})")
            time.sleep(0.3)
            pts = cdp.js(f"__items('pareto_hf', {json.dumps(target)}, 'symbol')")
            assert pts, "the design's point was not found in the chart"
            x, y = pts[0]["x"], pts[0]["y"]
            # the design's own point is what the mouse will hit there
            assert cdp.js(f"__hits('pareto_hf', {json.dumps(target)}, 'symbol', {x}, {y})")
            before = cdp.js(f"__items('nichols', {json.dumps(others[0])}, 'line')")
            assert before and before[0]["opacity"] == 1
            for kind in ("mouseMoved", "mousePressed", "mouseReleased"):
                cdp.call("Input.dispatchMouseEvent", type=kind, x=x, y=y, button="left",
                         clickCount=1)
            deadline = time.monotonic() + 20
            while True:
                mine = cdp.js(f"__items('nichols', {json.dumps(target)}, 'line')")
                other = cdp.js(f"__items('nichols', {json.dumps(others[0])}, 'line')")
                if other and other[0]["opacity"] < 1:
                    break
                assert time.monotonic() < deadline, "the click did not select the design"
                time.sleep(0.2)
            # the clicked design stays drawn, every other fades — here and in the Ms chart
            assert mine and mine[0]["opacity"] == 1
            for name in others:
                got = cdp.js(f"__items('nichols', {json.dumps(name)}, 'line')")
                assert got and got[0]["opacity"] == pytest.approx(0.15)
                pt = cdp.js(f"__items('pareto_hf', {json.dumps(name)}, 'symbol')")
                assert pt and pt[0]["opacity"] == pytest.approx(0.15)
            assert cdp.js(f"__items('pareto_hf', {json.dumps(target)}, 'symbol')")[0][
                "opacity"] == 1
            stored = cdp.js("JSON.stringify(__view('nichols').data('pick_store'))")
            assert target in stored
        finally:
            proc.terminate()
            try:
                proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                proc.kill()
