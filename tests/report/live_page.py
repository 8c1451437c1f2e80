#!/usr/bin/env python3
"""The live status page in headless Chromium during a running demo session (issue 19, docs/live.md).

A demo session runs against the simulated controller (loadtrim-sim at 20x, a short warm-up) with an access token
in LOADTRIM_LIVE_TOKEN; the page's address is read from the tool's own output. Checked, each against what the
session itself reports at /state (the same snapshot the page draws), never against the page's wording alone:
  - Chromium renders the page (--dump-dom) with the token: its DOM's state (data-state) advances from one dump
    to a later one, and during a coast-down the speed trace (data-points of the SVG) gains points between two
    dumps taken about 1.5 s apart; a screenshot is a real PNG;
  - it works without network: Chromium's resolver is told every host but 127.0.0.1 does not exist, and the page
    names no external script, style, font or image;
  - without the token (and with a wrong one) the page, its state and its stream answer 401; no route accepts a
    POST;
  - a non-loopback bind without a token is refused before anything starts (exit 2, naming LOADTRIM_LIVE_TOKEN).

Usage: live_page.py --exe build/bin/loadtrim --src SOURCE_DIR --workdir DIR
"""
import argparse, json, os, re, shutil, subprocess, sys, tempfile, time, urllib.error, urllib.request

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
from testlib import FAILED, expect, finish  # noqa: E402

ARGS = None
TOKEN = "live-test-token-7f3a"




def env(token=True):
    e = dict(os.environ)
    e["LOADTRIM_LOCK_DIR"] = os.path.join(ARGS.workdir, "locks")
    e["LOADTRIM_DATA_DIR"] = os.path.join(ARGS.workdir, "data")
    e.pop("LOADTRIM_LIVE_TOKEN", None)
    if token:
        e["LOADTRIM_LIVE_TOKEN"] = TOKEN
    return e


def get(url, timeout=5, method="GET"):
    try:
        with urllib.request.urlopen(urllib.request.Request(url, method=method), timeout=timeout) as r:
            return r.status, r.read(200000).decode("utf-8", "replace")
    except urllib.error.HTTPError as e:
        return e.code, ""
    except (urllib.error.URLError, OSError) as e:
        return -1, str(e)


def chromium(*args):
    exe = shutil.which("chromium")
    prof = tempfile.mkdtemp(prefix="lt-chromium-")
    try:
        return subprocess.run([exe, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                               "--disable-background-networking", "--disable-component-update", "--disable-sync",
                               "--host-resolver-rules=MAP * ~NOTFOUND , EXCLUDE 127.0.0.1",
                               "--user-data-dir=" + prof] + list(args), capture_output=True, text=True, timeout=60)
    finally:
        shutil.rmtree(prof, ignore_errors=True)


def dom(url):
    r = chromium("--timeout=2500", "--dump-dom", url)
    html = r.stdout if r.returncode == 0 else ""
    state = re.search(r'id="state"[^>]*data-state="([a-z_]+)"|data-state="([a-z_]+)"[^>]*id="state"', html)
    pts = re.search(r'data-points="(\d+)"', html)
    run = re.search(r'id="trace-run">(\d+|-)<', html)
    return {"state": (state.group(1) or state.group(2)) if state else None,
            "points": int(pts.group(1)) if pts else -1,
            "run": run.group(1) if run else None, "html": html}


def state(base):
    code, body = get(base + "state?token=" + TOKEN)
    try:
        return json.loads(body) if code == 200 else None
    except ValueError:
        return None


def main():
    global ARGS
    ap = argparse.ArgumentParser()
    for a in ("--exe", "--src", "--workdir"):
        ap.add_argument(a, required=True)
    ARGS = ap.parse_args()
    for a in ("exe", "src", "workdir"):
        setattr(ARGS, a, os.path.abspath(getattr(ARGS, a)))
    shutil.rmtree(ARGS.workdir, ignore_errors=True)
    os.makedirs(ARGS.workdir)
    if not shutil.which("chromium"):
        expect("chromium (Debian package, in .ci/setup's test packages) is installed", False)
        return 1

    r = subprocess.run([ARGS.exe, "demo", "--live-bind", "0.0.0.0:0", "--quiet"], cwd=ARGS.workdir, env=env(False),
                       capture_output=True, text=True, timeout=60)
    expect("a non-loopback bind without a token is refused before anything starts (exit 2)",
           r.returncode == 2 and "LOADTRIM_LIVE_TOKEN" in r.stderr and
           not os.path.isdir(os.path.join(ARGS.workdir, "data", "sessions")) or
           (r.returncode == 2 and "LOADTRIM_LIVE_TOKEN" in r.stderr and
            not os.listdir(os.path.join(ARGS.workdir, "data", "sessions"))), r.stderr[-500:])

    p = subprocess.Popen([ARGS.exe, "demo", "--time-scale", "20", "--profile",
                          os.path.join(ARGS.src, "tests/data/wltp-iterative-short-warmup.toml")],
                         cwd=ARGS.workdir, env=env(), stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    base = None
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and base is None:
        line = p.stdout.readline()
        if not line:
            break
        m = re.search(r"live page: (http://127\.0\.0\.1:\d+/)", line)
        if m:
            base = m.group(1)
    expect("the demo prints where its live page is", base is not None)
    if base is None:
        p.kill()
        return 1
    try:
        page = base + "?token=" + TOKEN
        # Refusals first (the server is up from here until the session ends).
        for path in ("", "state", "events"):
            expect("/%s without the token is refused (401)" % path, get(base + path)[0] == 401)
        expect("a wrong token is refused (401)", get(base + "state?token=wrong-" + TOKEN)[0] == 401)
        code, _ = get(base + "state?token=" + TOKEN, method="POST")
        expect("no route takes a POST (it never commands anything)", code in (400, 404, 405), code)
        code, html = get(page)
        expect("the page names no external script, style, font or image",
               code == 200 and not re.search(r'(src|href)\s*=\s*"(https?:)?//|url\(|@import', html), html[:300])
        first = dom(page)
        expect("Chromium rendered the page with the token and its DOM shows a state (%s)" % first["state"],
               first["state"] is not None, first["html"][:300])
        # Wait for a coast-down with some trace, then two dumps about 1.5 s apart.
        s = None
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline:
            s = state(base)
            if s and s["state"] == "coast_down" and len(s["trace"]["points"]) >= 3:
                break
            time.sleep(0.1)
        expect("the session reached a coast-down with a trace (/state)",
               s is not None and s["state"] == "coast_down", s and s.get("state"))
        a = dom(page)
        time.sleep(1.5)
        b = dom(page)
        expect("the DOM's state advanced between the first dump and a later one (%s -> %s)" % (first["state"], a["state"]),
               first["state"] is not None and a["state"] is not None and first["state"] != a["state"])
        expect("the trace gained points between two dumps (%d -> %d, run %s -> %s)" % (a["points"], b["points"], a["run"], b["run"]),
               a["points"] > 0 and (b["points"] > a["points"] or (b["run"] not in (None, "-") and b["run"] != a["run"])))
        shot = os.path.join(ARGS.workdir, "live.png")
        chromium("--timeout=2500", "--window-size=900,1300", "--screenshot=" + shot, page)
        ok = os.path.exists(shot) and open(shot, "rb").read(8) == b"\x89PNG\r\n\x1a\n" and os.path.getsize(shot) > 5000
        expect("a screenshot of the running page is a PNG (PNG signature, RFC 2083)", ok)
    finally:
        try:
            rest = p.communicate(timeout=240)[0]
        except subprocess.TimeoutExpired:
            p.kill()
            rest = p.communicate()[0]
    expect("the demo session ended with a verdict (exit 0 or 1)", p.returncode in (0, 1), rest[-600:])
    expect("the page is gone once the session has ended", get(base + "state?token=" + TOKEN, timeout=2)[0] == -1)
    return finish()


if __name__ == "__main__":
    sys.exit(main())
