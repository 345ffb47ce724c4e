"""The HTML report: self-contained, escaped, and rendered by a real headless browser.

The browser check drives Debian's Chromium through the DevTools protocol (a minimal
websocket client from the standard library, RFC 6455): it loads the report from
``file://``, waits for the load event, asks the page whether every image decoded, and
collects console messages, uncaught exceptions and log entries of level error.
"""

from __future__ import annotations

import base64
import json
import os
import re
import shutil
import socket
import struct
import subprocess
import time
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner

from geothermmap import run_recipe
from geothermmap.outputs import FROST_CAUTION
from geothermmap.report import render_html, write_report
from tests.conftest import make_case, write_recipe

CHROMIUM = Path("/usr/bin/chromium")
OUTPUTS = ["t_mean", "frost_depth", "conductivity"]  # degC, frost (caution), plain


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    tmp = tmp_path_factory.mktemp("report")
    recipe = write_recipe(tmp, make_case(tmp), outputs=OUTPUTS)
    return run_recipe(recipe, tmp / "out").output_dir


@pytest.fixture(scope="module")
def report(run_dir: Path) -> Path:
    return write_report(run_dir)


def test_report_is_one_self_contained_file(report: Path, run_dir: Path):
    text = report.read_text(encoding="utf-8")
    assert report == run_dir / "report.html"
    # no external resource of any kind: every src/href is a data URI or an in-page anchor
    refs = re.findall(r"""(?:src|href)\s*=\s*["']([^"']*)["']""", text, flags=re.I)
    assert refs, "the report should embed images"
    assert all(r.startswith(("data:image/png;base64,", "#")) for r in refs), refs
    assert "http://" not in text and "https://" not in text
    assert "<script" not in text.lower() and "<link" not in text.lower()
    assert "url(" not in text  # no CSS fetches either
    # one embedded PNG per output, each a valid PNG
    uris = re.findall(r'src="data:image/png;base64,([^"]+)"', text)
    assert len(uris) == len(OUTPUTS)
    for uri in uris:
        assert base64.b64decode(uri)[:8] == b"\x89PNG\r\n\x1a\n"
    # the quicklooks missing before the report were rendered beside it
    assert sorted(p.stem for p in (run_dir / "quicklook").glob("*.png")) == sorted(OUTPUTS)


def test_report_sections(report: Path, run_dir: Path):
    text = report.read_text(encoding="utf-8")
    rec = json.loads((run_dir / "run_record.json").read_text())
    for heading in ("Recipe", "Inputs", "Outputs", "Counts", "Notes", "Versions", "Timings"):
        assert f">{heading}</h2>" in text
    assert 'class="caution"' in text and FROST_CAUTION in text  # frost_depth is a frost map
    assert "harmonics: 2" in text  # the recipe as YAML
    sha = rec["inputs"]["surface_temperature"]["files"][0]["sha256"]
    assert sha[:12] in text
    assert f">{rec['counts']['valid_cells']}<" in text
    assert f">{rec['counts']['nodata_cells']}<" in text
    for name in OUTPUTS:
        assert f'id="out-{name.replace("_", "-")}"' in text


def test_record_text_is_escaped(run_dir: Path):
    rec = json.loads((run_dir / "run_record.json").read_text())
    rec["recipe"]["name"] = "<img src=x onerror=alert(1)>"
    rec["notes"] = ["a & b <b>bold</b>"]
    page = render_html(rec, {})
    assert "<img src=x" not in page and "&lt;img src=x onerror=alert(1)&gt;" in page
    assert "a &amp; b &lt;b&gt;bold&lt;/b&gt;" in page


def test_report_command(run_dir: Path, tmp_path: Path):
    from geothermmap.cli import main

    (run_dir / "quicklook" / "conductivity.png").unlink(missing_ok=True)
    result = CliRunner().invoke(main, ["report", str(run_dir)])
    assert result.exit_code == 0, result.output
    assert (run_dir / "quicklook" / "conductivity.png").is_file()  # re-rendered
    bad = CliRunner().invoke(main, ["report", str(tmp_path)])
    assert bad.exit_code == 1 and "run_record.json" in bad.output


# --------------------------------------------------------------------------- browser


class _WebSocket:
    """The client side of RFC 6455, enough for the DevTools protocol (text frames)."""

    def __init__(self, host: str, port: int, path: str, timeout: float):
        self.sock = socket.create_connection((host, port), timeout=timeout)
        key = base64.b64encode(os.urandom(16)).decode()
        self.sock.sendall((f"GET {path} HTTP/1.1\r\nHost: {host}:{port}\r\n"
                           "Upgrade: websocket\r\nConnection: Upgrade\r\n"
                           f"Sec-WebSocket-Key: {key}\r\nSec-WebSocket-Version: 13\r\n\r\n"
                           ).encode())
        head = b""
        while b"\r\n\r\n" not in head:
            chunk = self.sock.recv(4096)
            if not chunk:
                raise ConnectionError("DevTools closed the connection during the handshake")
            head += chunk
        status, _, self._buf = head.partition(b"\r\n\r\n")
        if b" 101 " not in status.split(b"\r\n")[0]:
            raise ConnectionError(f"websocket handshake refused: {status[:200]!r}")

    def _exact(self, n: int) -> bytes:
        while len(self._buf) < n:
            chunk = self.sock.recv(65536)
            if not chunk:
                raise ConnectionError("DevTools closed the connection")
            self._buf += chunk
        out, self._buf = self._buf[:n], self._buf[n:]
        return out

    def _send_frame(self, opcode: int, payload: bytes) -> None:
        n = len(payload)
        head = bytes([0x80 | opcode])
        if n < 126:
            head += bytes([0x80 | n])
        elif n < 1 << 16:
            head += bytes([0x80 | 126]) + struct.pack("!H", n)
        else:
            head += bytes([0x80 | 127]) + struct.pack("!Q", n)
        mask = os.urandom(4)
        self.sock.sendall(head + mask + bytes(b ^ mask[i % 4] for i, b in enumerate(payload)))

    def send(self, text: str) -> None:
        self._send_frame(0x1, text.encode())

    def recv(self) -> str:
        message = b""
        while True:
            b0, b1 = self._exact(2)
            n = b1 & 0x7F
            if n == 126:
                n = struct.unpack("!H", self._exact(2))[0]
            elif n == 127:
                n = struct.unpack("!Q", self._exact(8))[0]
            mask = self._exact(4) if b1 & 0x80 else b""
            payload = self._exact(n)
            if mask:
                payload = bytes(b ^ mask[i % 4] for i, b in enumerate(payload))
            opcode = b0 & 0x0F
            if opcode == 0x8:
                raise ConnectionError("DevTools closed the websocket")
            if opcode == 0x9:  # ping
                self._send_frame(0xA, payload)
                continue
            if opcode in (0x0, 0x1, 0x2):
                message += payload
                if b0 & 0x80:
                    return message.decode()

    def close(self) -> None:
        try:
            self._send_frame(0x8, b"")
        except OSError:
            pass
        self.sock.close()


class _DevTools:
    """Calls and events of one page session over the browser's DevTools websocket."""

    def __init__(self, ws: _WebSocket, deadline: float):
        self.ws, self.deadline, self.next_id = ws, deadline, 0
        self.events: list[dict[str, Any]] = []
        self.session: str | None = None

    def _wait(self, want) -> dict[str, Any]:
        while time.monotonic() < self.deadline:
            msg = json.loads(self.ws.recv())
            if "method" in msg:
                self.events.append(msg)
            if want(msg):
                return msg
        raise TimeoutError("no answer from headless Chromium in time")

    def call(self, method: str, **params: Any) -> dict[str, Any]:
        self.next_id += 1
        msg: dict[str, Any] = {"id": self.next_id, "method": method, "params": params}
        if self.session and not method.startswith("Target."):
            msg["sessionId"] = self.session
        self.ws.send(json.dumps(msg))
        answer = self._wait(lambda m, i=self.next_id: m.get("id") == i)
        if "error" in answer:
            raise RuntimeError(f"{method}: {answer['error']}")
        return answer.get("result", {})

    def wait_event(self, method: str) -> dict[str, Any]:
        for ev in self.events:
            if ev["method"] == method:
                return ev
        return self._wait(lambda m: m.get("method") == method)


def _chromium_or_skip() -> Path:
    if CHROMIUM.is_file() and os.access(CHROMIUM, os.X_OK):
        return CHROMIUM
    message = (f"{CHROMIUM} not found: install Debian's chromium package "
               "(apt-get install chromium; .ci/run does this)")
    if os.environ.get("CI"):
        pytest.fail(message)
    pytest.skip(message)


def _browser_check(page: Path, profile: Path, timeout: float = 25.0) -> dict[str, Any]:
    """Load ``page`` in headless Chromium; image status and errors reported by the page."""
    exe = _chromium_or_skip()
    profile.mkdir(parents=True, exist_ok=True)
    proc = subprocess.Popen(
        [str(exe), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
         "--no-first-run", "--disable-background-networking", "--disable-component-update",
         "--disable-sync", "--disable-extensions", f"--user-data-dir={profile}",
         "--remote-debugging-address=127.0.0.1", "--remote-debugging-port=0", "about:blank"],
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True)
    deadline = time.monotonic() + timeout
    ws = None
    try:
        port_file = profile / "DevToolsActivePort"
        while not (port_file.is_file() and len(port_file.read_text().split()) >= 2):
            if proc.poll() is not None:
                raise RuntimeError(f"chromium exited with code {proc.returncode}")
            if time.monotonic() > deadline:
                raise TimeoutError("chromium did not open its DevTools port")
            time.sleep(0.1)
        port, path = port_file.read_text().split()[:2]
        ws = _WebSocket("127.0.0.1", int(port), path, timeout)
        dt = _DevTools(ws, deadline)
        target = dt.call("Target.createTarget", url="about:blank")["targetId"]
        dt.session = dt.call("Target.attachToTarget", targetId=target,
                             flatten=True)["sessionId"]
        for domain in ("Page", "Runtime", "Log"):
            dt.call(f"{domain}.enable")
        dt.events.clear()
        dt.call("Page.navigate", url=page.resolve().as_uri())
        dt.wait_event("Page.loadEventFired")
        js = ("({n: document.images.length, ok: Array.from(document.images).every("
              "i => i.complete && i.naturalWidth > 0), "
              "h2: document.querySelectorAll('h2').length, title: document.title})")
        value = dt.call("Runtime.evaluate", expression=js, returnByValue=True)["result"]["value"]
        errors = []
        for ev in dt.events:
            p = ev.get("params", {})
            if ev["method"] == "Runtime.exceptionThrown":
                errors.append(p.get("exceptionDetails", {}).get("text", "exception"))
            elif ev["method"] == "Runtime.consoleAPICalled" and p.get("type") in (
                    "error", "assert", "warning"):
                errors.append(f"console.{p['type']}: {p.get('args')}")
            elif ev["method"] == "Log.entryAdded" and p.get("entry", {}).get("level") in (
                    "error", "warning"):
                errors.append(f"log: {p['entry'].get('text')} {p['entry'].get('url', '')}")
        value["errors"] = errors
        return value
    finally:
        if ws is not None:
            ws.close()
        proc.terminate()
        try:
            proc.wait(timeout=5)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        shutil.rmtree(profile, ignore_errors=True)


def test_report_renders_in_headless_chromium(report: Path, tmp_path: Path):
    seen = _browser_check(report, tmp_path / "profile")
    assert seen["n"] == len(OUTPUTS)
    assert seen["ok"], "every embedded image must decode"
    assert seen["h2"] >= 7 and seen["title"].startswith("geothermmap report")
    assert seen["errors"] == []


def test_browser_check_sees_broken_images_and_errors(tmp_path: Path):
    """The check itself can fail: a broken image and a console error are reported."""
    page = tmp_path / "bad.html"
    page.write_text('<!DOCTYPE html><html><head><meta charset="utf-8"><title>t</title>'
                    '</head><body><img src="data:image/png;base64,AAAA">'
                    "<script>console.error('boom')</script></body></html>")
    seen = _browser_check(page, tmp_path / "profile")
    assert seen["n"] == 1 and not seen["ok"]
    assert any("boom" in e for e in seen["errors"])
