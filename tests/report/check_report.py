#!/usr/bin/env python3
"""Report checks (tests for the HTML report, its SVG plots, CSV exports and PDF).

Independent references used here: Python's xml.etree parser (well-formed SVG), the NIST SP 811 factors written out
below (1 lbf = 4.4482216152605 N, 1 mph = 1.609344 km/h), headless Chromium from Debian for rendering, and PIL
(Debian python3-pil) to read the rendered pixels.
"""
import argparse, csv, glob, html.parser, json, os, re, shutil, subprocess, sys, tempfile
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

    # Spreadsheet exports: for a decimal-comma spreadsheet (';' between fields, ',' in numbers) and in US units. The
    # reference reader is Python's csv module; the US values are checked against the metric export with the NIST
    # SP 811 factors above.
    def table(path, delimiter=","):
        with open(path, newline="", encoding="utf-8") as f:
            return list(csv.reader(f, delimiter=delimiter))

    def number(x):
        return float(x.replace(",", "."))

    metric = {"coef": table(folder + "/coefficients.csv"), "dev": table(folder + "/deviations.csv")}
    r = run(a.exe, "report", folder, "--csv-decimal-comma")
    check(r.returncode == 0, "report --csv-decimal-comma")
    comma = {"coef": table(folder + "/coefficients.csv", ";"), "dev": table(folder + "/deviations.csv", ";")}
    same = all(len(comma[k]) == len(metric[k]) for k in metric)
    for k in metric:
        check(comma[k][0] == metric[k][0], "decimal comma %s.csv: the same header, ';' between fields" % k)
        for mrow, crow in zip(metric[k][1:], comma[k][1:]):
            for m, c in zip(mrow, crow):
                if re.fullmatch(r"-?\d+\.\d+", m):
                    same = same and "." not in c and abs(number(c) - float(m)) <= 1e-12
                else:
                    same = same and m == c
    check(same, "decimal comma exports read back (csv.reader ';', ',' as the decimal mark) equal the metric ones")
    r = run(a.exe, "report", folder, "--csv-decimal-comma", "--csv-us")
    check(r.returncode == 0, "report --csv-decimal-comma --csv-us")
    us = {"coef": table(folder + "/coefficients.csv", ";"), "dev": table(folder + "/deviations.csv", ";")}
    check(us["coef"][0] == ["run", "what", "a_lbf", "b_lbf_per_mph", "c_lbf_per_mph2"] and
          us["dev"][0] == ["run", "speed_mph", "target_lbf", "measured_lbf", "deviation_lbf", "pass"],
          "US exports: every table in lbf, lbf/mph, lbf/mph² and mph")
    bad = 0
    for mrow, urow in zip(metric["coef"][1:], us["coef"][1:]):
        f0, f1, f2 = (float(x) for x in mrow[2:5])
        a_, b_, c_ = (number(x) for x in urow[2:5])
        # 4, 6 and 7 decimals written; the metric side is rounded too (4, 6, 7 decimals).
        bad += abs(a_ * LBF - f0) > 0.5e-4 * LBF + 0.5e-4
        bad += abs(b_ * LBF / MPH - f1) > 0.5e-6 * LBF / MPH + 0.5e-6
        bad += abs(c_ * LBF / MPH ** 2 - f2) > 0.5e-7 * LBF / MPH ** 2 + 0.5e-7
    for mrow, urow in zip(metric["dev"][1:], us["dev"][1:]):
        bad += abs(number(urow[1]) * MPH - float(mrow[1])) > 0.5e-4 * MPH + 0.05
        for i in (2, 3, 4):
            bad += abs(number(urow[i]) * LBF - float(mrow[i])) > 0.5e-4 * LBF + 0.5e-3
        bad += urow[5] != mrow[5]
    check(bad == 0 and len(us["dev"]) == len(metric["dev"]) and len(us["coef"]) == len(metric["coef"]),
          "US exports equal the metric ones with the NIST factors, within the rounding written (%d off)" % bad)
    r = run(a.exe, "report", folder)
    check(r.returncode == 0 and open(folder + "/coefficients.csv").read().startswith("run,what,f0_n"),
          "report without the options writes the metric, decimal-point exports again")

    # The plots' fixes, read from the SVG: the coast-down axis has whole-number ticks; the tolerance line and the
    # tolerance band lie strictly inside the frame; the force plot's band is stroked; coast-down 1 is drawn last
    # on the speed plot, each coast-down with its own colour and dash.
    by_id = {ET.fromstring(x).get("id"): ET.fromstring(x) for x in svgs}
    NS = "{http://www.w3.org/2000/svg}"

    def frame(root):
        f = [e for e in root.iter(NS + "rect") if e.get("class") == "frame"][0]
        return float(f.get("y")), float(f.get("y")) + float(f.get("height"))

    def ys(points):
        return [float(p.split(",")[1]) for p in points.split()]

    conv = by_id["plot-convergence"]
    ticks = [t.text for t in conv.iter(NS + "text") if t.get("class") == "tick-x"]
    check(len(ticks) >= 2 and all(re.fullmatch(r"-?\d+", t) for t in ticks),
          "convergence plot: coast-down ticks are whole numbers %s" % ticks)
    top, bottom = frame(conv)
    tol_line = [e for e in conv.iter(NS + "polyline") if e.get("class") == "tolerance"]
    check(len(tol_line) == 1 and all(top + 1 < y < bottom - 1 for y in ys(tol_line[0].get("points"))),
          "convergence plot: the tolerance line is strictly inside the frame (%s, frame %s to %s)" %
          (tol_line[0].get("points") if tol_line else None, top, bottom))
    dev = by_id["plot-deviation"]
    top, bottom = frame(dev)
    band = [e for e in dev.iter(NS + "polygon") if e.get("class") == "band"][0]
    band_y = ys(band.get("points"))
    # "Readable": at least 20 px high (a rule of thumb: common practice, no source); on the 0-1000 N force plot
    # the same band is about 5 px.
    check(all(top + 1 < y < bottom - 1 for y in band_y) and (max(band_y) - min(band_y)) >= 20,
          "deviation panel: the ±tolerance band is inside the frame and at least 20 px high (%.1f px, frame %s to %s)"
          % (max(band_y) - min(band_y), top, bottom))
    force_band = [e for e in by_id["plot-force"].iter(NS + "polygon") if e.get("class") == "band"][0]
    check(force_band.get("stroke") not in (None, "none"), "force plot: the ±tolerance band's edges are drawn")
    lines = [e for e in by_id["plot-speed"].iter(NS + "polyline") if e.get("data-series")]
    styles = {(e.get("stroke"), e.get("stroke-dasharray")) for e in lines}
    check(len(lines) >= 2 and lines[-1].get("data-series") == "coast-down 1" and len(styles) == len(lines),
          "speed plot: coast-down 1 drawn last, each coast-down with its own colour and dash %s" %
          [(e.get("data-series"), e.get("stroke"), e.get("stroke-dasharray")) for e in lines])

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
