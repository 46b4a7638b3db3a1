"""The report in a real headless browser (Debian's chromium): the page renders with its answers first and its
figures drawn, and it makes no network request.

Every request the browser makes goes to a recording proxy on the loopback interface (--proxy-server);
the browser's own calls home (BROWSER_OWN) are set aside; a control page with one remote image must show
up there, so the "no request" check can fail. The page with the 3-D views of real geometries is loaded
the same way in tests/test_report_3d.py."""

from __future__ import annotations

import re
import shutil
import socket
import subprocess
import threading
from pathlib import Path

import pytest

from chairqm.report import write_report

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
pytestmark = pytest.mark.skipif(CHROMIUM is None, reason="needs a headless chromium (Debian: apt install chromium)")


class RecordingProxy:
    """A loopback HTTP proxy that records the first line of every request and answers 404."""

    def __init__(self):
        self.sock = socket.socket()
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(16)
        self.port = self.sock.getsockname()[1]
        self.requests: list[str] = []
        self._stop = False
        self.thread = threading.Thread(target=self._serve, daemon=True)
        self.thread.start()

    def _serve(self):
        self.sock.settimeout(0.2)
        while not self._stop:
            try:
                conn, _ = self.sock.accept()
            except OSError:
                continue
            with conn:
                conn.settimeout(2)
                try:
                    first = conn.recv(4096).split(b"\r\n", 1)[0].decode(errors="replace")
                    if first:
                        self.requests.append(first)
                    conn.sendall(b"HTTP/1.1 404 Not Found\r\nContent-Length: 0\r\nConnection: close\r\n\r\n")
                except OSError:
                    pass

    def close(self):
        self._stop = True
        self.thread.join(timeout=2)
        self.sock.close()


# Chromium calls home by itself even for an empty page (network clock, sign-in, update redirector: measured
# here with a blank file and every --disable flag below; Debian's chromium 156.0.8078.114 also posts to its
# component updater, update.googleapis.com/service/update2, despite --disable-component-update). Those
# hosts are not the page's; fonts.googleapis.com, gstatic.com and every other host a page could pull
# resources from stay counted.
BROWSER_OWN = re.compile(r"^(www|accounts|clients\d)\.google\.com$|^redirector\.gvt1\.com$|^update\.googleapis\.com$")


def _host(request_line: str) -> str:
    target = request_line.split()[1] if len(request_line.split()) > 1 else ""
    target = re.sub(r"^[a-z]+://", "", target)
    return target.split("/", 1)[0].rsplit(":", 1)[0]


def page_requests(requests: list[str]) -> list[str]:
    return [r for r in requests if not BROWSER_OWN.match(_host(r))]


def render(page: Path, tmp: Path) -> tuple[str, list[str]]:
    """(the DOM after the page loaded, the requests the proxy saw that were not the browser's own)."""
    proxy = RecordingProxy()
    try:
        proc = subprocess.run([CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                               f"--user-data-dir={tmp / 'profile'}", f"--proxy-server=http://127.0.0.1:{proxy.port}",
                               "--proxy-bypass-list=<-loopback>", "--disable-background-networking",
                               "--disable-component-update", "--disable-sync", "--disable-default-apps",
                               # the browser's own calls home (clock, sign-in, hints), which are not the page's
                               "--disable-features=NetworkTimeServiceQuerying,OptimizationHints,MediaRouter,"
                               "Translate,AutofillServerCommunication,CertificateTransparencyComponentUpdater",
                               "--disable-client-side-phishing-detection", "--disable-domain-reliability",
                               "--no-pings", "--disable-breakpad", "--metrics-recording-only",
                               "--virtual-time-budget=3000", "--dump-dom", page.resolve().as_uri()],
                              capture_output=True, text=True, timeout=120)
    finally:
        proxy.close()
    assert proc.returncode == 0, proc.stderr[-2000:]
    return proc.stdout, page_requests(proxy.requests)


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    from test_report import RUN_INFO, write_run_folder
    folder = write_run_folder(tmp_path_factory.mktemp("browser-run"))
    return write_report(folder, RUN_INFO)


def test_report_renders_answers_first_and_requests_nothing(page, tmp_path):
    dom, requests = render(page, tmp_path)
    assert requests == [], f"the report made network requests: {requests}"
    assert "<article" in dom and "</html>" in dom
    # the parsed page: verdicts before the molecules, settings and provenance after them
    order = [dom.index(s) for s in ('id="overview"', "<article", 'id="settings"')]
    assert order == sorted(order)
    # the figures are inline SVG the browser parsed into the DOM (depictions and plots of every molecule)
    n_articles = len(re.findall(r"<article", dom))
    assert len(re.findall(r"<svg", dom)) >= 2 * n_articles


def test_the_proxy_sees_a_remote_resource(page, tmp_path):
    """Control: the same page with one remote image is caught, so an empty request list means something."""
    text = page.read_text(encoding="utf-8").replace(
        "</main>", '<img src="http://chairqm-control.invalid/pixel.png" alt=""></main>', 1)
    leaky = tmp_path / "leaky.html"
    leaky.write_text(text, encoding="utf-8")
    _, requests = render(leaky, tmp_path)
    assert any("chairqm-control.invalid" in r for r in requests), requests


def test_browser_own_hosts_are_only_the_browsers():
    assert page_requests(["CONNECT www.google.com:443 HTTP/1.1", "GET http://clients2.google.com/time/1 HTTP/1.1",
                          "CONNECT fonts.googleapis.com:443 HTTP/1.1", "GET http://cdn.example.org/x.js HTTP/1.1",
                          "CONNECT www.google.com.evil.example:443 HTTP/1.1"]) == [
        "CONNECT fonts.googleapis.com:443 HTTP/1.1", "GET http://cdn.example.org/x.js HTTP/1.1",
        "CONNECT www.google.com.evil.example:443 HTTP/1.1"]
