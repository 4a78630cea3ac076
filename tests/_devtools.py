"""A small client of the browser's DevTools protocol over a WebSocket, with
the standard library only (test support for the real-browser report test).

WebSocket framing after RFC 6455 (client frames masked, server frames not;
continuation frames joined; pings answered). The browser is Debian's
``chromium`` run headless; it writes its debugging port into
``<profile>/DevToolsActivePort``.
"""
from __future__ import annotations

import base64
import json
import os
import shutil
import socket
import struct
import subprocess
import time
import urllib.request
from pathlib import Path


def find_browser() -> str | None:
    for name in ("chromium", "chromium-browser"):
        p = shutil.which(name)
        if p:
            return p
    return None


class WebSocket:
    def __init__(self, url: str, timeout: float = 60.0):
        assert url.startswith("ws://"), url
        rest = url[len("ws://"):]
        hostport, _, path = rest.partition("/")
        host, _, port = hostport.partition(":")
        self.sock = socket.create_connection((host, int(port)), timeout=timeout)
        key = base64.b64encode(os.urandom(16)).decode()
        req = (f"GET /{path} HTTP/1.1\r\nHost: {hostport}\r\nUpgrade: websocket\r\nConnection: Upgrade\r\n"
               f"Sec-WebSocket-Key: {key}\r\nSec-WebSocket-Version: 13\r\n\r\n")
        self.sock.sendall(req.encode())
        head = b""
        while b"\r\n\r\n" not in head:
            chunk = self.sock.recv(4096)
            if not chunk:
                raise ConnectionError("no handshake answer")
            head += chunk
        status, _, self._buf = head.partition(b"\r\n\r\n")
        if b" 101 " not in status.split(b"\r\n")[0]:
            raise ConnectionError(status.decode(errors="replace"))

    def _read(self, n: int) -> bytes:
        while len(self._buf) < n:
            chunk = self.sock.recv(1 << 20)
            if not chunk:
                raise ConnectionError("closed")
            self._buf += chunk
        out, self._buf = self._buf[:n], self._buf[n:]
        return out

    def _send_frame(self, opcode: int, payload: bytes) -> None:
        head = bytes([0x80 | opcode])
        n = len(payload)
        if n < 126:
            head += bytes([0x80 | n])
        elif n < 1 << 16:
            head += bytes([0x80 | 126]) + struct.pack(">H", n)
        else:
            head += bytes([0x80 | 127]) + struct.pack(">Q", n)
        mask = os.urandom(4)
        body = bytes(b ^ mask[i % 4] for i, b in enumerate(payload))
        self.sock.sendall(head + mask + body)

    def send(self, text: str) -> None:
        self._send_frame(0x1, text.encode())

    def recv(self) -> str:
        parts = []
        while True:
            b0, b1 = self._read(2)
            fin, opcode = b0 & 0x80, b0 & 0x0F
            n = b1 & 0x7F
            if n == 126:
                n = struct.unpack(">H", self._read(2))[0]
            elif n == 127:
                n = struct.unpack(">Q", self._read(8))[0]
            mask = self._read(4) if b1 & 0x80 else None
            data = self._read(n)
            if mask:
                data = bytes(b ^ mask[i % 4] for i, b in enumerate(data))
            if opcode == 0x9:
                self._send_frame(0xA, data)
                continue
            if opcode == 0x8:
                raise ConnectionError("closed by the browser")
            parts.append(data)
            if fin:
                return b"".join(parts).decode()

    def close(self) -> None:
        try:
            self._send_frame(0x8, b"")
        except OSError:
            pass
        self.sock.close()


class Browser:
    """A headless browser with one page; ``call`` sends a DevTools command
    and returns its result; every event is kept in ``events``."""

    def __init__(self, profile: Path, timeout: float = 60.0):
        exe = find_browser()
        if exe is None:
            raise FileNotFoundError("chromium")
        self.proc = subprocess.Popen(
            [exe, "--headless=new", "--no-sandbox", "--disable-gpu", "--no-first-run", "--no-default-browser-check",
             "--disable-extensions", "--disable-background-networking", "--remote-debugging-port=0",
             f"--user-data-dir={profile}", "--window-size=1200,900", "about:blank"],
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        port_file = Path(profile) / "DevToolsActivePort"
        t0 = time.monotonic()
        while not (port_file.is_file() and port_file.read_text().strip()):
            if time.monotonic() - t0 > timeout or self.proc.poll() is not None:
                self.close()
                raise TimeoutError("the browser did not open its DevTools port")
            time.sleep(0.1)
        port = int(port_file.read_text().split()[0])
        pages = []
        while not pages:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=10) as r:
                pages = [t for t in json.load(r) if t.get("type") == "page"]
            if not pages:
                time.sleep(0.1)
        self.ws = WebSocket(pages[0]["webSocketDebuggerUrl"], timeout=timeout)
        self.events: list[dict] = []
        self._id = 0

    def call(self, method: str, **params):
        self._id += 1
        my = self._id
        self.ws.send(json.dumps({"id": my, "method": method, "params": params}))
        while True:
            msg = json.loads(self.ws.recv())
            if msg.get("id") == my:
                if "error" in msg:
                    raise RuntimeError(f"{method}: {msg['error']}")
                return msg.get("result", {})
            if "method" in msg:
                self.events.append(msg)

    def wait_for(self, method: str, timeout: float = 60.0) -> dict:
        t0 = time.monotonic()
        for e in self.events:
            if e["method"] == method:
                return e
        while time.monotonic() - t0 < timeout:
            msg = json.loads(self.ws.recv())
            if "method" in msg:
                self.events.append(msg)
                if msg["method"] == method:
                    return msg
        raise TimeoutError(method)

    def evaluate(self, expression: str):
        r = self.call("Runtime.evaluate", expression=expression, returnByValue=True, awaitPromise=True)
        if "exceptionDetails" in r:
            raise RuntimeError(r["exceptionDetails"])
        return r["result"].get("value")

    def close(self) -> None:
        try:
            if getattr(self, "ws", None) is not None:
                self.ws.close()
        finally:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
