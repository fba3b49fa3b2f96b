#!/usr/bin/env python3
"""Open an HTML page in headless Chromium as a reader would, and fail on what a reader
would notice: a console error or uncaught exception, a request that leaves the file
(the page must be self-contained), a figure that is missing or has no size, an in-page
link without its target. Saves a screenshot for a human to look at.

Talks to Chromium over the DevTools protocol on a pipe (--remote-debugging-pipe: fd 3
carries commands in, fd 4 answers out, each message JSON ended by a NUL byte), so no
port is opened and nothing but the Python standard library is needed.

usage: browser_check.py CHROMIUM PAGE.html SCREENSHOT.png
"""
import base64
import json
import os
import select
import subprocess
import sys
import tempfile
import time

TIMEOUT_S = 90


class Browser:
    def __init__(self, exe):
        self.profile = tempfile.mkdtemp(prefix="lagwise-chromium-")
        to_chrome_r, self.to_chrome = os.pipe()
        self.from_chrome, from_chrome_w = os.pipe()

        def wire():
            os.dup2(to_chrome_r, 3)
            os.dup2(from_chrome_w, 4)

        flags = [
            "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
            "--no-first-run", "--disable-background-networking",
            "--disable-component-update", "--disable-sync", "--disable-extensions",
            "--disable-default-apps", "--hide-scrollbars", "--mute-audio",
            "--disable-breakpad", "--disable-crash-reporter",
            # Nothing may leave this machine: names resolve to nothing, and any http(s)
            # request goes to a closed loopback port.
            "--host-resolver-rules=MAP * ~NOTFOUND",
            "--proxy-server=http://127.0.0.1:9", "--proxy-bypass-list=<-loopback>",
            "--user-data-dir=" + self.profile, "--remote-debugging-pipe",
            "about:blank",
        ]
        self.proc = subprocess.Popen(
            # The descriptors are closed after preexec_fn runs: keep 3 and 4 by number.
            [exe] + flags, pass_fds=(to_chrome_r, from_chrome_w, 3, 4), preexec_fn=wire,
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
        )
        os.close(to_chrome_r)
        os.close(from_chrome_w)
        self.buf = b""
        self.next_id = 0
        self.events = []
        self.deadline = time.time() + TIMEOUT_S

    def _read_message(self):
        while b"\0" not in self.buf:
            left = self.deadline - time.time()
            if left <= 0:
                raise TimeoutError("no answer from Chromium")
            ready, _, _ = select.select([self.from_chrome], [], [], left)
            if not ready:
                continue
            chunk = os.read(self.from_chrome, 1 << 20)
            if not chunk:
                raise RuntimeError("Chromium closed the pipe (did it start?)")
            self.buf += chunk
        msg, self.buf = self.buf.split(b"\0", 1)
        return json.loads(msg)

    def send(self, method, params=None, session=None):
        self.next_id += 1
        msg = {"id": self.next_id, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        os.write(self.to_chrome, json.dumps(msg).encode() + b"\0")
        while True:
            m = self._read_message()
            if m.get("id") == self.next_id:
                if "error" in m:
                    raise RuntimeError(f"{method}: {m['error']}")
                return m.get("result", {})
            self.events.append(m)

    def wait_for(self, method):
        for i, m in enumerate(self.events):
            if m.get("method") == method:
                return self.events.pop(i)
        while True:
            m = self._read_message()
            if m.get("method") == method:
                return m
            self.events.append(m)

    def close(self):
        try:
            self.send("Browser.close")
        except Exception:
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()


# Run in the page after load: what a reader would see missing.
AUDIT = r"""
(() => {
  const figures = [...document.querySelectorAll('figure.card')];
  const blank = figures.filter(f => {
    const s = f.querySelector('svg');
    if (!s) return true;
    const r = s.getBoundingClientRect();
    return r.width < 100 || r.height < 100 || !s.querySelector('title') || !s.querySelector('desc');
  }).map(f => f.querySelector('figcaption')?.textContent || '(figure without caption)');
  const dangling = [...document.querySelectorAll('a[href^="#"]')]
    .map(a => a.getAttribute('href').slice(1))
    .filter(id => !document.getElementById(id));
  const tags = document.querySelectorAll('#roster tbody tr').length;
  return JSON.stringify({
    figures: figures.length,
    declared: Number(document.body.dataset.cards),
    declaredTags: Number(document.body.dataset.tags),
    blank, dangling, tags,
    title: document.title,
    height: document.documentElement.scrollHeight,
  });
})()
"""


def main():
    exe, page, shot = sys.argv[1], os.path.abspath(sys.argv[2]), sys.argv[3]
    url = "file://" + page
    b = Browser(exe)
    problems = []
    try:
        target = b.send("Target.createTarget", {"url": "about:blank"})["targetId"]
        session = b.send("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        for domain in ("Page", "Runtime", "Log", "Network"):
            b.send(domain + ".enable", session=session)
        b.send("Emulation.setDeviceMetricsOverride",
               {"width": 1280, "height": 1800, "deviceScaleFactor": 1, "mobile": False},
               session=session)
        b.send("Page.navigate", {"url": url}, session=session)
        b.wait_for("Page.loadEventFired")
        audit = json.loads(b.send("Runtime.evaluate", {"expression": AUDIT, "returnByValue": True},
                                  session=session)["result"]["value"])
        png = b.send("Page.captureScreenshot", {"format": "png"}, session=session)["data"]
        os.makedirs(os.path.dirname(os.path.abspath(shot)), exist_ok=True)
        with open(shot, "wb") as f:
            f.write(base64.b64decode(png))
        # Whatever arrived while loading: console errors, exceptions, requests.
        for m in b.events:
            method, p = m.get("method"), m.get("params", {})
            if method == "Runtime.exceptionThrown":
                problems.append("uncaught exception: " + json.dumps(p.get("exceptionDetails", {}))[:300])
            elif method == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                problems.append("console error: " + json.dumps(p.get("args", []))[:300])
            elif method == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
                problems.append("log error: " + p["entry"].get("text", "")[:300])
            elif method == "Network.requestWillBeSent":
                req = p.get("request", {}).get("url", "")
                if req != url and not req.startswith("data:"):
                    problems.append("the page fetched " + req)
    finally:
        b.close()
        subprocess.run(["rm", "-rf", b.profile], check=False)
    if audit["figures"] == 0:
        problems.append("no figure on the page")
    if audit["figures"] != audit["declared"]:
        problems.append(f"{audit['figures']} figures shown, {audit['declared']} declared")
    if audit["tags"] != audit["declaredTags"]:
        problems.append(f"{audit['tags']} roster rows, {audit['declaredTags']} tags declared")
    for name in audit["blank"]:
        problems.append("figure without size or title/desc: " + name)
    for id_ in audit["dangling"]:
        problems.append("link to a missing target: #" + id_)
    print(f"browser check: '{audit['title']}': {audit['tags']} tags, {audit['figures']} figures, "
          f"page {audit['height']} px tall; screenshot {shot}")
    if problems:
        for p in problems:
            print("  PROBLEM:", p)
        sys.exit(1)


if __name__ == "__main__":
    main()
