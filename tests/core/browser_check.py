#!/usr/bin/python3
"""Renders an HTML report in headless Chromium and checks it.

One browser run per page (two when the page is taller than the first
window): a copy of the page with two small passive scripts added (one
records load errors in capture phase, one measures every plot and the
page after the load event and appends the numbers to the DOM) is loaded
with --dump-dom and --screenshot together, with Chromium's log on stderr.
The report itself has no scripts; the copy differs from it only by those
two script elements, which draw nothing.

Fails on: script errors, failed loads, any resource fetched at all (the
page must be self-contained), console messages or network errors in the
browser log, and on each listed plot that is missing, not an
<svg class="plot">, tiny, blank (too few pixels unlike its background, or
too few colours) or without the series colours expected for it.

Exit status 0 when every check passes, 1 otherwise (reasons on stdout),
2 for usage or browser trouble. Needs only the Python standard library;
python3-pil (PNG decoding) and python3-numpy (colour histograms) make it
several times faster when present (a zlib PNG decoder is built in).
"""

import argparse
import html
import json
import os
import re
import shutil
import signal
import struct
import subprocess
import sys
import tempfile
import zlib

CHROMIUM_FLAGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
    "--no-first-run", "--disable-background-networking",
    "--disable-component-update", "--disable-sync", "--hide-scrollbars",
    "--force-device-scale-factor=1", "--mute-audio",
]

HEAD_SCRIPT = """<script>window.__fluxtrimErrors = [];
addEventListener('error', function (e) {
  var t = e.target;
  if (t && t !== window) {
    __fluxtrimErrors.push('resource failed: ' + (t.src || t.href || t.data || t.tagName));
  } else {
    __fluxtrimErrors.push('script error: ' + e.message);
  }
}, true);</script>"""

TAIL_SCRIPT = """<script>addEventListener('load', function () {
  var ids = %s;
  var de = document.documentElement;
  var out = {ids: {}, errors: __fluxtrimErrors,
             resources: performance.getEntriesByType('resource').map(function (r) { return r.name; }),
             height: Math.ceil(document.body.getBoundingClientRect().bottom + scrollY + 24),
             width: de.clientWidth, plots: document.querySelectorAll('svg.plot').length};
  ids.forEach(function (id) {
    var el = document.getElementById(id);
    if (!el) { out.ids[id] = null; return; }
    var r = el.getBoundingClientRect();
    out.ids[id] = {x: r.left + scrollX, y: r.top + scrollY, w: r.width, h: r.height,
                   tag: el.tagName.toLowerCase(), cls: el.getAttribute('class') || ''};
  });
  var pre = document.createElement('pre');
  pre.id = '__fluxtrim_check';
  pre.textContent = JSON.stringify(out);
  document.body.appendChild(pre);
});</script>"""


# ---------------------------------------------------------------------------
# PNG decoding (8-bit RGB/RGBA, non-interlaced: what Chromium writes).

def _paeth(a, b, c):
    p = a + b - c
    pa, pb, pc = abs(p - a), abs(p - b), abs(p - c)
    if pa <= pb and pa <= pc:
        return a
    return b if pb <= pc else c


def decode_png_builtin(path):
    """Returns (width, height, channels, rows) with rows a list of bytes."""
    with open(path, "rb") as f:
        data = f.read()
    if data[:8] != b"\x89PNG\r\n\x1a\n":
        raise ValueError("not a PNG file")
    pos, idat, header = 8, [], None
    while pos < len(data):
        length, kind = struct.unpack(">I4s", data[pos:pos + 8])
        body = data[pos + 8:pos + 8 + length]
        pos += 12 + length
        if kind == b"IHDR":
            header = struct.unpack(">IIBBBBB", body)
        elif kind == b"IDAT":
            idat.append(body)
        elif kind == b"IEND":
            break
    width, height, depth, colour, _, _, interlace = header
    if depth != 8 or colour not in (2, 6) or interlace != 0:
        raise ValueError("unsupported PNG layout %r" % (header,))
    bpp = 3 if colour == 2 else 4
    raw = zlib.decompress(b"".join(idat))
    stride = width * bpp
    rows, prev = [], bytearray(stride)
    for y in range(height):
        start = y * (stride + 1)
        ftype = raw[start]
        line = bytearray(raw[start + 1:start + 1 + stride])
        if ftype == 1:
            for i in range(bpp, stride):
                line[i] = (line[i] + line[i - bpp]) & 0xFF
        elif ftype == 2:
            for i in range(stride):
                line[i] = (line[i] + prev[i]) & 0xFF
        elif ftype == 3:
            for i in range(stride):
                left = line[i - bpp] if i >= bpp else 0
                line[i] = (line[i] + ((left + prev[i]) >> 1)) & 0xFF
        elif ftype == 4:
            for i in range(stride):
                left = line[i - bpp] if i >= bpp else 0
                up_left = prev[i - bpp] if i >= bpp else 0
                line[i] = (line[i] + _paeth(left, prev[i], up_left)) & 0xFF
        rows.append(bytes(line))
        prev = line
    return width, height, bpp, rows


class Screenshot:
    """A decoded PNG; colour_counts() histograms a rectangle of it."""

    def __init__(self, path, builtin=False):
        try:
            if builtin:
                raise ImportError("builtin decoder requested")
            from PIL import Image  # Debian python3-pil, optional: faster
            self._image = Image.open(path).convert("RGB")
            self.width, self.height = self._image.size
        except ImportError:
            self._image = None
            self.width, self.height, self._bpp, self._rows = decode_png_builtin(path)

    def colour_counts(self, x0, y0, x1, y1):
        x0, y0 = max(0, x0), max(0, y0)
        x1, y1 = min(self.width, x1), min(self.height, y1)
        if x1 <= x0 or y1 <= y0:
            return {}
        if self._image is not None:
            rgb = self._image.crop((x0, y0, x1, y1)).tobytes()
        else:
            bpp = self._bpp
            if bpp == 3:
                rgb = b"".join(self._rows[y][3 * x0:3 * x1] for y in range(y0, y1))
            else:  # drop alpha
                rgb = bytearray()
                for y in range(y0, y1):
                    row = self._rows[y][4 * x0:4 * x1]
                    for i in range(0, len(row), 4):
                        rgb += row[i:i + 3]
                rgb = bytes(rgb)
        try:
            import numpy as np  # fast histogram when NumPy is there
            a = np.frombuffer(rgb, dtype=np.uint8).reshape(-1, 3).astype(np.uint32)
            packed = (a[:, 0] << 16) | (a[:, 1] << 8) | a[:, 2]
            values, counts = np.unique(packed, return_counts=True)
            return {((int(v) >> 16) & 255, (int(v) >> 8) & 255, int(v) & 255): int(n)
                    for v, n in zip(values, counts)}
        except ImportError:
            counts = {}
            for i in range(0, len(rgb), 3):
                p = (rgb[i], rgb[i + 1], rgb[i + 2])
                counts[p] = counts.get(p, 0) + 1
            return counts


def hex_colour(s):
    s = s.lstrip("#")
    return tuple(int(s[i:i + 2], 16) for i in (0, 2, 4))


# ---------------------------------------------------------------------------

def run_chromium(chromium, args, timeout_s):
    with tempfile.TemporaryDirectory(prefix="fluxtrim_chromium_") as profile:
        cmd = [chromium] + CHROMIUM_FLAGS + ["--user-data-dir=" + profile] + args
        # Own process group, so a hung browser goes with all its helpers.
        proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                start_new_session=True)
        try:
            out, err = proc.communicate(timeout=timeout_s)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.communicate()
            return -1, "", "chromium did not finish within %.0f s" % timeout_s
        return proc.returncode, out.decode("utf-8", "replace"), \
            err.decode("utf-8", "replace")


def page_log_problems(stderr):
    """Console messages and failed loads in Chromium's log. The report has
    no scripts, so any console message at all is a problem; so is any
    network error."""
    problems = []
    for line in stderr.splitlines():
        if ":CONSOLE" in line or "net::ERR_" in line or "Failed to load" in line:
            problems.append(line.strip())
    return problems


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--chromium", default="/usr/bin/chromium")
    ap.add_argument("--html", required=True)
    ap.add_argument("--ids", required=True, help="comma-separated plot ids")
    ap.add_argument("--expect-colour", action="append", default=[],
                    help="ID_PREFIX=#rrggbb,#rrggbb: colours every plot whose "
                         "id starts with ID_PREFIX must show")
    ap.add_argument("--width", type=int, default=1280)
    ap.add_argument("--height", type=int, default=6000,
                    help="first window height; a taller page gets a second run")
    ap.add_argument("--min-ink", type=float, default=0.02,
                    help="least fraction of a plot's pixels unlike its background")
    ap.add_argument("--min-colours", type=int, default=3,
                    help="least number of distinct colours in a plot (background included)")
    ap.add_argument("--min-colour-pixels", type=int, default=15)
    ap.add_argument("--png", help="keep the screenshot here")
    ap.add_argument("--builtin-png", action="store_true",
                    help="decode with the built-in zlib decoder even if PIL exists")
    ap.add_argument("--timeout", type=float, default=120.0)
    args = ap.parse_args()

    ids = [i for i in args.ids.split(",") if i]
    expected = []
    for spec in args.expect_colour:
        prefix, colours = spec.split("=", 1)
        expected.append((prefix, [hex_colour(c) for c in colours.split(",")]))
    if not os.path.exists(args.chromium):
        print("chromium not found at " + args.chromium)
        return 2
    with open(args.html, encoding="utf-8") as f:
        page = f.read()
    problems = []

    work = tempfile.mkdtemp(prefix="fluxtrim_browser_")
    try:
        probe = page.replace("<head>", "<head>" + HEAD_SCRIPT, 1)
        probe = probe.replace("</body>", TAIL_SCRIPT % json.dumps(ids) + "</body>", 1)
        probe_path = os.path.join(work, "probe.html")
        with open(probe_path, "w", encoding="utf-8") as f:
            f.write(probe)
        png_path = os.path.join(work, "page.png")
        height = args.height
        for attempt in range(2):
            if os.path.exists(png_path):
                os.remove(png_path)
            rc, dom, err = run_chromium(
                args.chromium, ["--enable-logging=stderr", "--v=0",
                                "--window-size=%d,%d" % (args.width, height),
                                "--dump-dom", "--screenshot=" + png_path,
                                "file://" + probe_path], args.timeout)
            m = re.search(r'<pre id="__fluxtrim_check">(.*?)</pre>', dom, re.S)
            if rc != 0 or not m or not os.path.exists(png_path):
                print("browser run failed (exit %d): no measurements or no "
                      "screenshot" % rc)
                print(err[-2000:])
                return 2
            info = json.loads(html.unescape(m.group(1)))
            if info["height"] <= height:
                break
            height = int(info["height"]) + 40  # taller page: once more
        problems += ["page: " + e for e in info["errors"]]
        problems += ["page loaded a resource: " + r for r in info["resources"]]
        if info["plots"] != len(ids):
            problems.append("page has %d svg.plot elements, expected %d"
                            % (info["plots"], len(ids)))
        problems += ["browser log: " + p for p in page_log_problems(err)]
        if args.png:
            try:  # cut the empty window below the page when PIL is there
                from PIL import Image
                im = Image.open(png_path)
                im.crop((0, 0, im.size[0], min(im.size[1], int(info["height"])))).save(args.png)
            except ImportError:
                shutil.copyfile(png_path, args.png)
        png = Screenshot(png_path, args.builtin_png)
        if png.width != args.width or png.height < info["height"]:
            problems.append("screenshot is %dx%d, page is %dx%d"
                            % (png.width, png.height, args.width, info["height"]))

        report = {}
        for pid in ids:
            r = info["ids"].get(pid)
            if r is None:
                problems.append("%s: not in the page" % pid)
                continue
            if r["tag"] != "svg" or "plot" not in r["cls"].split():
                problems.append("%s: is <%s class=%r>, expected <svg class=\"plot\">"
                                % (pid, r["tag"], r["cls"]))
            if r["w"] < 100 or r["h"] < 80:
                problems.append("%s: rendered only %.0fx%.0f px" % (pid, r["w"], r["h"]))
                continue
            # Inset by 3 px so the CSS border alone cannot pass as a drawing.
            x0, y0 = int(r["x"]) + 3, int(r["y"]) + 3
            x1, y1 = int(r["x"] + r["w"]) - 3, int(r["y"] + r["h"]) - 3
            counts = png.colour_counts(x0, y0, x1, y1)
            if not counts:
                problems.append("%s: outside the screenshot" % pid)
                continue
            total = sum(counts.values())
            background = max(counts, key=counts.get)
            ink = sum(n for p, n in counts.items()
                      if max(abs(p[i] - background[i]) for i in range(3)) > 24)
            fraction = ink / float(total)
            # Colours after 4-bit quantisation, ignoring rare anti-aliasing.
            quantised = {}
            for p, n in counts.items():
                q = (p[0] >> 4, p[1] >> 4, p[2] >> 4)
                quantised[q] = quantised.get(q, 0) + n
            colours = sum(1 for n in quantised.values() if n >= 10)
            report[pid] = {"ink": round(fraction, 4), "colours": colours,
                           "size": [x1 - x0, y1 - y0]}
            if fraction < args.min_ink:
                problems.append("%s: looks blank (%.2f%% ink < %.2f%%)"
                                % (pid, 100 * fraction, 100 * args.min_ink))
            if colours < args.min_colours:
                problems.append("%s: only %d colour(s)" % (pid, colours))
            for prefix, wanted in expected:
                if not pid.startswith(prefix):
                    continue
                for c in wanted:
                    hits = sum(n for p, n in counts.items()
                               if max(abs(p[i] - c[i]) for i in range(3)) <= 10)
                    if hits < args.min_colour_pixels:
                        problems.append("%s: colour #%02x%02x%02x drawn on %d px only"
                                        % ((pid,) + c + (hits,)))
        print(json.dumps({"page_height": info["height"], "plots": report}, indent=1))
    finally:
        shutil.rmtree(work, ignore_errors=True)

    for p in problems:
        print("PROBLEM: " + p)
    return 1 if problems else 0


if __name__ == "__main__":
    sys.exit(main())
