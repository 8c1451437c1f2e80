#!/usr/bin/env python3
"""Report checks (tests for the HTML report, its SVG plots, CSV exports and PDF).

Independent references used here: Python's xml.etree parser (well-formed SVG), the NIST SP 811 factors written out
below (1 lbf = 4.4482216152605 N, 1 mph = 1.609344 km/h), headless Chromium from Debian for rendering, and PIL
(Debian python3-pil) to read the rendered pixels.
"""
import argparse, glob, html.parser, json, os, re, shutil, subprocess, sys, tempfile
import xml.etree.ElementTree as ET

LBF = 4.4482216152605      # N per lbf, NIST SP 811 App. B (exact)
MPH = 1.609344             # km/h per mph, NIST SP 811 App. B (exact)
failures = []
passes = []


def check(cond, what):
    (passes if cond else failures).append(what)
    print("ok:" if cond else "FAIL:", what)


def run(*cmd, **kw):
    return subprocess.run(list(cmd), capture_output=True, text=True, **kw)


class Cells(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.cells, self.cur = [], None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "td" and "data-record" in a:
            self.cur = [a, ""]

    def handle_data(self, data):
        if self.cur is not None:
            self.cur[1] += data

    def handle_endtag(self, tag):
        if tag == "td" and self.cur is not None:
            self.cells.append(tuple(self.cur))
            self.cur = None


def value_at(rec, key):
    v = rec
    for part in key.split("."):
        v = v[int(part)] if isinstance(v, list) else v[part]
    return v


def chromium(*args):
    exe = shutil.which("chromium")
    if not exe:
        return None
    prof = tempfile.mkdtemp(prefix="lt-chromium-")
    return run(exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
               "--disable-background-networking", "--disable-component-update", "--disable-sync",
               "--user-data-dir=" + prof, "--hide-scrollbars", *args, timeout=120)


def drawn_fraction(png, box=None, coloured=False):
    from PIL import Image
    im = Image.open(png).convert("RGB")
    if box:
        im = im.crop(box)
    px = list(im.getdata())
    if coloured:  # pixels of a data colour, not grey/black/white
        n = sum(1 for r, g, b in px if max(r, g, b) - min(r, g, b) > 60)
    else:
        n = sum(1 for r, g, b in px if min(r, g, b) < 235)
    return n / max(1, len(px))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--exe", required=True)
    ap.add_argument("--workdir", required=True)
    a = ap.parse_args()
    shutil.rmtree(a.workdir, ignore_errors=True)
    os.makedirs(a.workdir)
    # A known session: the in-process demo with the standard's default first setting (so coast-down 1 fails).
    r = run(a.exe, "demo", "--in-process", "--sessions", a.workdir, "--quiet", "--first-setting", "standard")
    check(r.returncode == 0, "demo session accepted (exit 0)")
    folder = [d for d in glob.glob(a.workdir + "/2*") if os.path.isdir(d)][0]
    report = open(folder + "/report.html", encoding="utf-8").read()
    records = {}
    for line in open(folder + "/events.jsonl", encoding="utf-8"):
        j = json.loads(line)
        records[j["seq"]] = j

    # Self-contained: no scripts, no external references.
    check("<script" not in report and "http://" not in report.replace("http://www.w3.org/2000/svg", "")
          and "https://" not in report and "@import" not in report and "url(" not in report,
          "report is self-contained (no scripts, links, fonts or network)")

    # SVG plots: well-formed XML, axis labels with units.
    svgs = re.findall(r"<svg.*?</svg>", report, re.S)
    check(len(svgs) == 5, "five SVG plots (force, deviation, speed-time, convergence, band times)")
    for s in svgs:
        root = ET.fromstring(s)  # raises on malformed XML
        labels = [t.text or "" for t in root.iter("{http://www.w3.org/2000/svg}text") if t.get("class") == "axis-label"]
        check(len(labels) == 2 and all(re.search(r"\((N|s|km/h)\)", l) or "coast-down" == l for l in labels),
              "plot %s: two axis labels with units: %s" % (root.get("id"), labels))

    # Every table value traced back to its log record.
    p = Cells()
    p.feed(report)
    check(len(p.cells) > 100, "report has %d traced table cells" % len(p.cells))
    bad = 0
    for attrs, text in p.cells:
        rec = records[int(attrs["data-record"])]
        v = float(value_at(rec, attrs["data-key"]))
        conv = attrs.get("data-convert", "")
        if conv == "lbf":
            v /= LBF
        elif conv == "lbf/mph":
            v = v * MPH / LBF
        elif conv == "lbf/mph2":
            v = v * MPH * MPH / LBF
        text = text.strip()
        decimals = len(text.split(".")[1]) if "." in text else 0
        if abs(float(text) - v) > 0.5 * 10 ** (-decimals) + 1e-9:
            bad += 1
            print("  mismatch:", attrs, text, v)
    check(bad == 0, "every traced cell equals its log value (NIST factors for US units)")
    check('class="num fail"' in report and "FAIL" in report, "a failing reference speed is marked")

    # CSV exports a spreadsheet opens: header plus rows, comma separated.
    coef = open(folder + "/coefficients.csv").read().splitlines()
    dev = open(folder + "/deviations.csv").read().splitlines()
    check(coef[0].startswith("run,what,f0_n") and len(coef) >= 4, "coefficients.csv")
    check(dev[0] == "run,speed_kmh,target_n,measured_n,deviation_n,pass" and len(dev) >= 13, "deviations.csv")

    # A broken chain is said on the first page (before the first section heading).
    broken = a.workdir + "/broken"
    shutil.copytree(folder, broken)
    lines = open(broken + "/events.jsonl").read().split("\n")
    lines[3] = lines[3].replace('"utc":"2', '"utc":"1', 1)
    open(broken + "/events.jsonl", "w").write("\n".join(lines))
    r = run(a.exe, "report", broken)
    check(r.returncode == 0, "report of a broken folder is written")
    b = open(broken + "/report.html", encoding="utf-8").read()
    pos = b.find("LOG CHAIN BROKEN")
    check(0 < pos < b.find("<h2"), "broken chain stated on the first page")

    # Rendering in headless Chromium.
    png = a.workdir + "/report.png"
    r = chromium("--window-size=1000,3000", "--screenshot=" + png, "file://" + folder + "/report.html")
    check(r is not None and os.path.exists(png), "headless Chromium rendered the report to PNG")
    if r is not None and os.path.exists(png):
        check(drawn_fraction(png) > 0.03, "rendered page is not blank")
        for s in svgs:
            root = ET.fromstring(s)
            w, h = int(root.get("width")), int(root.get("height"))
            page = a.workdir + "/%s.html" % root.get("id")
            open(page, "w").write("<html><body style='margin:0'>" + s + "</body></html>")
            out = a.workdir + "/%s.png" % root.get("id")
            chromium("--window-size=%d,%d" % (w, h), "--screenshot=" + out, "file://" + page)
            # The plot region (inside the axes: 70 px left, 34 top, 20 right, 52 bottom) holds drawn data.
            frac = drawn_fraction(out, (71, 35, w - 21, h - 53), coloured=True)
            check(frac > 0.002, "plot %s: data drawn in the plot region (%.4f of pixels)" % (root.get("id"), frac))
    r = run(a.exe, "report", folder, "--pdf")
    check(r.returncode == 0 and open(folder + "/report.pdf", "rb").read(5) == b"%PDF-", "PDF printed by headless Chromium")

    print("report checks: %d passed, %d failed" % (len(passes), len(failures)))
    sys.exit(1 if failures else 0)


if __name__ == "__main__":
    main()
