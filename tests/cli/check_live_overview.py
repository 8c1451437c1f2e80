#!/usr/bin/env python3
"""A dyno check's live page, and the lab overview from the store (issue 19: "While a session or check runs, the
tool serves a read-only page ... A lab overview page lists every cell's current or last session from the store").

On one data root with a migrated SQLite store and an invented cell (a copy of the TCP cell file) on loadtrim-sim:
  - `loadtrim check readiness --live` prints its page's address; while the check runs its /state says it is a
    check, names its step, draws its coast's trace (points), and the analysed result's rows arrive before the end;
    meanwhile `loadtrim overview --format json` shows the cell running with that page's address. Afterwards the
    overview names the check's folder with the end its result.json holds, and nothing runs;
  - a short `loadtrim run` on the same cell: the overview's last session is that folder, with the result, the
    acceptance and the final set its summary.json holds (the store indexes the seal's result, which verify has
    found equal to summary.json: docs/store.md);
  - bad options: --format yaml and a non-loopback --bind without a token are refused (exit 2); a store that is
    missing is a sentence and exit 5; the page itself answers 401 without a token when one is set.

Usage: check_live_overview.py --exe build/bin/loadtrim --sim build/bin/loadtrim-sim --src SOURCE_DIR --workdir DIR
"""
import argparse, json, os, re, shutil, subprocess, sys, threading, time, urllib.error, urllib.request

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "support"))
from testlib import expect, finish, start_sim, env as testlib_env  # noqa: E402

ARGS = None
CELL = "overview test bay (invented) <b>&"


def tool(*argv, timeout=120, **extra):
    return subprocess.run([ARGS.exe] + list(argv), cwd=ARGS.workdir, env=testlib_env(ARGS.workdir, **extra),
                          capture_output=True, text=True, timeout=timeout)


def get(url, timeout=5):
    try:
        with urllib.request.urlopen(url, timeout=timeout) as r:
            return r.status, r.read(400000).decode("utf-8", "replace")
    except urllib.error.HTTPError as e:
        return e.code, ""
    except (urllib.error.URLError, OSError) as e:
        return -1, str(e)


def overview():
    r = tool("overview", "--format", "json")
    try:
        return json.loads(r.stdout) if r.returncode == 0 else None
    except ValueError:
        return None


def cell_of(view):
    for c in (view or {}).get("cells", []):
        if c["cell"] == CELL:
            return c
    return None


def main():
    global ARGS
    ap = argparse.ArgumentParser()
    for a in ("--exe", "--sim", "--src", "--workdir"):
        ap.add_argument(a, required=True)
    ARGS = ap.parse_args()
    for a in ("exe", "sim", "src", "workdir"):
        setattr(ARGS, a, os.path.abspath(getattr(ARGS, a)))
    shutil.rmtree(ARGS.workdir, ignore_errors=True)
    os.makedirs(ARGS.workdir)

    r = tool("overview", "--format", "json")
    expect("no store yet: a sentence and exit 5", r.returncode == 5 and "store migrate" in r.stderr,
           (r.returncode, r.stderr[-300:]))
    r = tool("store", "migrate")
    expect("the store is made", r.returncode == 0, r.stdout + r.stderr)
    r = tool("overview", "--format", "yaml")
    expect("--format yaml is refused naming the allowed forms (exit 2)",
           r.returncode == 2 and "text, json or html" in r.stderr, (r.returncode, r.stderr[-300:]))
    env_no_token = {"LOADTRIM_LIVE_TOKEN": ""}
    r = tool("overview", "--bind", "0.0.0.0:0", **env_no_token)
    expect("a non-loopback --bind without a token is refused (exit 2)",
           r.returncode == 2 and "LOADTRIM_LIVE_TOKEN" in r.stderr, (r.returncode, r.stderr[-300:]))
    r = tool("overview", "--format", "json")
    expect("an empty store: no cell (exit 0)", r.returncode == 0 and json.loads(r.stdout)["cells"] == [], r.stdout)

    base = open(os.path.join(ARGS.src, "config/cells/sim-tcp.toml")).read()
    text = re.sub(r'(?m)^name\s*=\s*".*"$', 'name = "%s"' % CELL, base, count=1)
    cell_file = os.path.join(ARGS.workdir, "cell.toml")
    open(cell_file, "w").write(text + "\n[checks]\nenforce = false\n")
    sim, port = start_sim(ARGS.sim, ARGS.src, time_scale=20)
    try:
        p = subprocess.Popen([ARGS.exe, "check", "readiness", "--cell", cell_file, "--port", str(port), "--unattended",
                              "--live"], cwd=ARGS.workdir, env=testlib_env(ARGS.workdir, LOADTRIM_LIVE_TOKEN=""),
                             stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
        url = None
        out = ""
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline and url is None:
            line = p.stdout.readline()
            if not line:
                break
            out += line
            m = re.search(r"live page: (http://127\.0\.0\.1:\d+/)", line)
            if m:
                url = m.group(1)
        expect("the check prints where its live page is", url is not None, out[-500:])
        seen = {"what": None, "steps": set(), "points": 0, "results": [], "running_url": None}
        streamed = []  # every snapshot the page's stream sent (/events, server-sent events)

        def read_stream():
            try:
                with urllib.request.urlopen(url + "events", timeout=30) as st:
                    for raw in st:
                        line = raw.decode("utf-8", "replace")
                        if line.startswith("data: "):
                            streamed.append(json.loads(line[6:]))
            except (OSError, ValueError):
                pass
        reader = threading.Thread(target=read_stream, daemon=True)
        if url:
            reader.start()
        deadline = time.monotonic() + 120
        while url and p.poll() is None and time.monotonic() < deadline:
            code, body = get(url + "state", timeout=2)
            if code == 200:
                s = json.loads(body)
                seen["what"] = s["what"]
                if s["step"]:
                    seen["steps"].add(s["step"])
                seen["points"] = max(seen["points"], len(s["trace"]["points"]))
                if len(s["results"]) >= len(seen["results"]):
                    seen["results"] = s["results"]
            if seen["running_url"] is None:
                c = cell_of(overview())
                if c and c["state"] == "running" and c["running"]:
                    seen["running_url"] = c["running"][0]["live_url"]
            time.sleep(0.2)
        rest = p.communicate(timeout=120)[0]
        out += rest
        if url:
            reader.join(timeout=30)
        # The stream sends each change as it comes (at most four a second): the analysed result is in a
        # snapshot even when it came moments before the end, between two polls.
        for snap in streamed:
            if len(snap.get("results", [])) >= len(seen["results"]):
                seen["results"] = snap["results"]
        expect("the check ended with a verdict (exit 0 or 1)", p.returncode in (0, 1), out[-800:])
        expect("its page said it is a check", seen["what"] == "check", seen)
        expect("its page named the check's steps (%s)" % sorted(seen["steps"]),
               any(x.startswith("coast-down 1") for x in seen["steps"]) and len(seen["steps"]) >= 2, seen)
        expect("its page drew the coast's trace (%d points)" % seen["points"], seen["points"] >= 3, seen)
        expect("meanwhile the overview showed the cell running, with the page's address (%s)" % seen["running_url"],
               url is not None and seen["running_url"] == url, seen)
        m = re.search(r"(?m)^folder: (.+)$", out)
        folder = m.group(1).strip() if m else None
        want = json.load(open(os.path.join(folder, "result.json"))) if folder else {}
        analysed = []
        if folder:
            for line in open(os.path.join(folder, "events.jsonl")):
                rec = json.loads(line)
                if rec.get("type") == "analysed":
                    analysed.append(rec)
        rows = [len(r.get("rows", [])) for r in seen["results"]]
        want_rows = [len((a.get("data") or a).get("intervals", [])) for a in analysed]
        expect("the page showed each analysed record's rows as the record holds them (%s, record %s)" %
               (rows, want_rows), analysed and rows == want_rows and all(n > 0 for n in rows),
               json.dumps(seen["results"])[:600] + " / " + json.dumps(analysed)[:600])
        c = cell_of(overview())
        expect("afterwards the overview names the check's folder and its end (%s)" % want.get("end"),
               c is not None and c["check"] is not None and c["check"]["name"] == os.path.basename(folder or "?") and
               c["check"]["result"] == want.get("end") and c["check"]["accepted"] == want.get("passed"),
               json.dumps(c)[:800])
        expect("and nothing runs on the cell", c is not None and c["state"] == "idle" and not c["running"], c)

        # The session on a faster simulator (the check above ran at 20x so that its page could be read meanwhile).
        sim.kill()
        sim.wait()
        sim, port = start_sim(ARGS.sim, ARGS.src, time_scale=100)
        r = subprocess.run([ARGS.exe, "run", "--cell", cell_file, "--target",
                            os.path.join(ARGS.src, "samples/targets/demo-hatchback.toml"), "--profile",
                            os.path.join(ARGS.src, "tests/data/wltp-iterative-short-warmup.toml"), "--port", str(port),
                            "--unattended", "--quiet", "--operator", "O. Verview"],
                           cwd=ARGS.workdir, env=testlib_env(ARGS.workdir), capture_output=True, text=True,
                           timeout=240)
        expect("a session on the cell reached a verdict (exit 0 or 1)", r.returncode in (0, 1), r.stderr[-600:])
    finally:
        sim.kill()
        sim.wait()
    sessions = os.path.join(ARGS.workdir, "data", "sessions")
    names = sorted(os.listdir(sessions)) if os.path.isdir(sessions) else []
    summary = json.load(open(os.path.join(sessions, names[-1], "summary.json"))) if names else {}
    c = cell_of(overview())
    got = (c or {}).get("session") or {}
    fs, ws = got.get("final_set") or {}, summary.get("final_set") or {}
    expect("the overview's last session is that folder, with its summary.json's result and acceptance (%s)" %
           summary.get("result"),
           names and got.get("name") == names[-1] and got.get("result") == summary.get("result") and
           got.get("accepted") == summary.get("accepted"), json.dumps(got)[:600])
    expect("and its final set, number for number",
           ws and all(fs.get(k) == ws.get(k) for k in ("f0_n", "f1_n_per_kmh", "f2_n_per_kmh2")), (fs, ws))
    r = tool("overview", "--format", "text")
    expect("the text names the cell and the session", r.returncode == 0 and CELL in r.stdout and
           (names[-1] if names else "?") in r.stdout, r.stdout[-600:])
    r = tool("overview", "--format", "html")
    expect("the page escapes the cell's name and has no script",
           r.returncode == 0 and "<b>&" not in r.stdout and "&lt;b&gt;&amp;" in r.stdout and "<script" not in r.stdout,
           r.stdout[:400])

    # Served with a token: refused without it, answered with it; Ctrl-C ends it (exit 0).
    srv = subprocess.Popen([ARGS.exe, "overview", "--refresh", "5"], cwd=ARGS.workdir,
                           env=testlib_env(ARGS.workdir, LOADTRIM_LIVE_TOKEN="ov-token-5150"),
                           stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    try:
        line = srv.stdout.readline()
        m = re.search(r"lab overview: (http://127\.0\.0\.1:\d+/)", line)
        expect("the served overview prints its address", m is not None, line)
        if m:
            expect("without its token it is refused (401)", get(m.group(1))[0] == 401)
            code, body = get(m.group(1) + "?token=ov-token-5150")
            expect("with its token it answers the page, refreshing itself",
                   code == 200 and 'http-equiv="refresh" content="5"' in body and "&lt;b&gt;&amp;" in body, body[:300])
            code, body = get(m.group(1) + "overview.json?token=ov-token-5150")
            expect("and its JSON", code == 200 and cell_of(json.loads(body)) is not None, body[:300])
    finally:
        srv.send_signal(2)
        try:
            srv.wait(timeout=10)
        except subprocess.TimeoutExpired:
            srv.kill()
            srv.wait()
    expect("Ctrl-C ends the served overview (exit 0)", srv.returncode == 0, srv.returncode)
    return finish()


if __name__ == "__main__":
    sys.exit(main())
