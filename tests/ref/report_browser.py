"""Drive headless Chromium (Debian's chromium) over the DevTools protocol
through a pipe (--remote-debugging-pipe: no network port), to use
report.html as a person would: click a column heading of the district
table and see the rows sorted, switch the map's shading, and collect every
script exception the page throws.

  report_browser.py REPORT_HTML

Exit 0 when the page behaves; otherwise a message on stderr and exit 1.
Standard library only (Debian's /usr/bin/python3).
"""
import json
import os
import subprocess
import sys
import tempfile
import time

TIMEOUT = 60.0


def fail(msg):
    sys.stderr.write("report_browser: " + msg + "\n")
    sys.exit(1)


class Browser:
    def __init__(self, url):
        to_chrome_r, self.to_chrome = os.pipe()
        self.from_chrome, from_chrome_w = os.pipe()
        profile = tempfile.mkdtemp(prefix="st-chrome-")

        def fds():
            os.dup2(to_chrome_r, 3)
            os.dup2(from_chrome_w, 4)

        self.proc = subprocess.Popen(
            ["chromium", "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
             "--no-first-run", "--disable-background-networking", "--disable-component-update",
             "--disable-sync", "--disable-dev-shm-usage", "--user-data-dir=" + profile,
             "--remote-debugging-pipe", "--window-size=1280,1600", "about:blank"],
            pass_fds=(3, 4), preexec_fn=fds, stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL)
        os.close(to_chrome_r)
        os.close(from_chrome_w)
        self.buf = b""
        self.next_id = 0
        self.events = []
        self.session = None
        self.url = url

    def send(self, method, params=None, session=True):
        self.next_id += 1
        msg = {"id": self.next_id, "method": method, "params": params or {}}
        if session and self.session:
            msg["sessionId"] = self.session
        os.write(self.to_chrome, json.dumps(msg).encode() + b"\0")
        return self.wait_reply(self.next_id)

    def read_message(self, deadline):
        while b"\0" not in self.buf:
            if time.time() > deadline:
                fail("no answer from Chromium in time")
            chunk = os.read(self.from_chrome, 65536)
            if not chunk:
                fail("Chromium closed the pipe")
            self.buf += chunk
        raw, self.buf = self.buf.split(b"\0", 1)
        return json.loads(raw)

    def wait_reply(self, msg_id):
        deadline = time.time() + TIMEOUT
        while True:
            m = self.read_message(deadline)
            if m.get("id") == msg_id:
                if "error" in m:
                    fail("DevTools error: %s" % m["error"])
                return m.get("result", {})
            self.events.append(m)

    def wait_event(self, name):
        deadline = time.time() + TIMEOUT
        for i, m in enumerate(self.events):
            if m.get("method") == name:
                return self.events.pop(i)
        while True:
            m = self.read_message(deadline)
            if m.get("method") == name:
                return m
            self.events.append(m)

    def open(self):
        targets = self.send("Target.getTargets", session=False)["targetInfos"]
        page = next(t for t in targets if t["type"] == "page")
        self.session = self.send("Target.attachToTarget",
                                 {"targetId": page["targetId"], "flatten": True},
                                 session=False)["sessionId"]
        self.send("Runtime.enable")
        self.send("Log.enable")
        self.send("Page.enable")
        self.send("Page.navigate", {"url": self.url})
        self.wait_event("Page.loadEventFired")

    def js(self, expr):
        r = self.send("Runtime.evaluate", {"expression": expr, "returnByValue": True})
        if "exceptionDetails" in r:
            fail("evaluating %r: %s" % (expr, r["exceptionDetails"].get("text")))
        return r["result"].get("value")

    def problems(self):
        out = []
        for m in self.events:
            if m.get("method") == "Runtime.exceptionThrown":
                out.append(m["params"]["exceptionDetails"].get("text", "exception"))
            if m.get("method") == "Log.entryAdded" and m["params"]["entry"]["level"] == "error":
                out.append(m["params"]["entry"].get("text", "error"))
            if m.get("method") == "Runtime.consoleAPICalled" and m["params"]["type"] == "error":
                out.append("console.error")
        return out

    def close(self):
        try:
            self.send("Browser.close", session=False)
        except SystemExit:
            pass
        try:
            self.proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            self.proc.kill()


COLUMN = """(function(col){
  var t=document.getElementById('district-table');
  return Array.prototype.map.call(t.tBodies[0].rows, function(r){
    return r.cells[col].getAttribute('data-v') || r.cells[col].textContent; });
})(%d)"""

CLICK = """(function(col){
  var th=document.getElementById('district-table').tHead.rows[0].cells[col];
  th.querySelector('button').click(); return th.getAttribute('aria-sort');
})(%d)"""

# Districts whose computed fill is not the legend swatch of their class in
# the shown mode (r: ratio, a: assumed; class n is the hatch).
LEGEND_MATCH = """(function(){
  var mode=document.getElementById('mm-a').checked?'a':'r', bad=[];
  var sw=document.querySelectorAll('.legend-'+mode+' svg rect');
  function rgb(hex){var n=parseInt(hex.slice(1),16);
    return 'rgb('+(n>>16)+', '+((n>>8)&255)+', '+(n&255)+')';}
  document.querySelectorAll('#districtmap path.district').forEach(function(p){
    var c=Array.prototype.filter.call(p.classList,function(k){
      return k.length===2 && k[0]===mode;})[0], f=getComputedStyle(p).fill;
    var want=c[1]==='n'?'url':rgb(sw[parseInt(c[1],10)].getAttribute('fill'));
    if(f.indexOf(want)!==0)bad.push(p.getAttribute('data-key')+' '+c+' '+f);
  });
  return bad;})()"""


def check(path):
    b = Browser("file://" + os.path.abspath(path))
    try:
        b.open()
        if b.js("document.documentElement.getAttribute('data-script')") != "ok":
            fail("the page script did not run to its end")
        shapes = b.js("document.querySelectorAll('#districtmap path.district').length")
        if not shapes:
            fail("no district shapes on the map")
        # sort by buildings (column 2), ascending then descending
        if b.js(CLICK % 2) != "ascending":
            fail("the heading does not say ascending after a click")
        up = [float(v) for v in b.js(COLUMN % 2)]
        if up != sorted(up):
            fail("buildings not ascending after one click: %s" % up)
        if b.js(CLICK % 2) != "descending":
            fail("the heading does not say descending after a second click")
        down = [float(v) for v in b.js(COLUMN % 2)]
        if down != sorted(up, reverse=True):
            fail("buildings not descending after two clicks: %s" % down)
        # sort by key (column 0): text order
        b.js(CLICK % 0)
        keys = b.js(COLUMN % 0)
        if keys != sorted(keys, key=lambda k: k.lower()) and keys != sorted(keys):
            fail("districts not in key order: %s" % keys)
        # the map's switch: each district takes its class's legend colour
        b.js("document.getElementById('mm-a').click()")
        wrong = b.js(LEGEND_MATCH)
        if wrong:
            fail("after the switch, districts not in their legend colour: %s" % wrong)
        legend = b.js("getComputedStyle(document.querySelector('.legend-a')).display")
        if legend == "none":
            fail("the assumed-values legend stays hidden after the switch")
        b.js("document.getElementById('mm-r').click()")
        wrong = b.js(LEGEND_MATCH)
        if wrong:
            fail("after switching back, districts not in their legend colour: %s" % wrong)
        bad = b.problems()
        if bad:
            fail("script errors: %s" % bad)
    finally:
        b.close()


if __name__ == "__main__":
    if len(sys.argv) != 2:
        fail("usage: report_browser.py REPORT_HTML")
    check(sys.argv[1])
