#!/usr/bin/env bash
# Renders the demo report (the index, the first structure page, the family page) in headless
# Chromium and checks that it draws something, that the 3D view of the channel networks draws
# into its WebGL canvas (SwiftShader, Chromium's CPU renderer: no GPU needed), and that nothing
# logs to the console.
#
#   HOPMAP_BIN=path/to/hopmap tools/check_report.sh      (default: target/release/hopmap)
#
# It builds nothing: build hopmap first (cargo build --release). It installs Debian's chromium
# package when no chromium is on the PATH (needs root, as in CI). Outputs go to
# target/report-check/: the demo folder, screenshots (*.png), DOM dumps and browser logs.
# Exit status: 0 when every page passes, 1 on a failed check, 2 when something is missing.
set -euo pipefail

start=$(date +%s)
cd "$(dirname "$0")/.."
BIN=${HOPMAP_BIN:-target/release/hopmap}
OUT=target/report-check

fail() { echo "check_report: FAIL: $*" >&2; exit 1; }
missing() { echo "check_report: $*" >&2; exit 2; }

[ -x "$BIN" ] || missing "no hopmap binary at $BIN (build it with 'cargo build --release' or set HOPMAP_BIN)"
command -v python3 >/dev/null || missing "python3 is needed to read the screenshots"

if ! command -v chromium >/dev/null; then
    echo "check_report: installing Debian's chromium ..." >&2
    [ "$(id -u)" = 0 ] || missing "chromium is not installed and we are not root to install it"
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null
fi
command -v chromium >/dev/null || missing "chromium did not install"

rm -rf "$OUT"
mkdir -p "$OUT"
echo "check_report: running the demo ..." >&2
"$BIN" demo --out "$OUT/demo" >"$OUT/demo-summary.txt" 2>"$OUT/demo-stderr.txt" \
    || { cat "$OUT/demo-stderr.txt" >&2; fail "hopmap demo failed"; }
[ -f "$OUT/demo/report.html" ] || fail "the demo wrote no report.html"

# The index and the first per-structure report it links to.
first=$(python3 - "$OUT/demo/report.html" <<'EOF'
import re, sys
page = open(sys.argv[1], encoding="utf-8").read()
# the family page (family.html) is a comparison, not a per-structure report
links = [h for h in re.findall(r'href="([^"#]+\.html)"', page) if not h.endswith("family.html")]
print(links[0] if links else "")
EOF
)
[ -n "$first" ] || fail "report.html links to no per-structure report"
pages=("report.html" "$first")
# the family comparison page, when the demo writes one
[ -f "$OUT/demo/family.html" ] && pages+=("family.html")

chrome() {
    # $1: page, $2: extra flag (--screenshot=... or --dump-dom), stdout: DOM when dumping
    local profile
    profile=$(mktemp -d)
    # WebGL on the CPU: ANGLE over SwiftShader (which Chromium only enables when asked)
    timeout 90 chromium --headless --no-sandbox --use-angle=swiftshader --enable-unsafe-swiftshader \
        --disable-quic --no-first-run --virtual-time-budget=5000 \
        --disable-background-networking --disable-component-update --disable-sync \
        --disable-dev-shm-usage --hide-scrollbars --user-data-dir="$profile" \
        --enable-logging=stderr --v=0 --window-size=1280,2400 "$2" "file://$PWD/$OUT/demo/$1"
    local rc=$?
    rm -rf "$profile"
    return $rc
}

for p in "${pages[@]}"; do
    name=${p%.html}
    echo "check_report: rendering $p ..." >&2
    chrome "$p" "--screenshot=$PWD/$OUT/$name.png" >/dev/null 2>"$OUT/$name.log" \
        || { tail -20 "$OUT/$name.log" >&2; fail "chromium could not render $p"; }
    [ -s "$OUT/$name.png" ] || fail "no screenshot of $p"
    chrome "$p" --dump-dom >"$OUT/$name.dom.html" 2>>"$OUT/$name.log" \
        || { tail -20 "$OUT/$name.log" >&2; fail "chromium could not dump the DOM of $p"; }

    # Console messages: Chromium logs every message of the page as a "CONSOLE" line (at INFO
    # level whatever the console level, so console.error cannot be told apart by its tag).
    # The only script of a report (the 3D view) logs nothing, so any console line at all (an
    # uncaught exception, a failed resource load, a refused fetch, a WebGL warning) is an error.
    if grep -Eq 'CONSOLE|Uncaught' "$OUT/$name.log"; then
        grep -E 'CONSOLE|Uncaught' "$OUT/$name.log" >&2
        fail "$p logs console messages (errors, failed loads or exceptions)"
    fi

    # The screenshot is not blank, and the DOM has the sections and the figures.
    python3 - "$OUT/$name.png" "$OUT/$name.dom.html" "$p" <<'EOF' || fail "$p did not pass the picture and DOM checks"
import struct, sys, zlib

png, dom_path, page = sys.argv[1], sys.argv[2], sys.argv[3]
data = open(png, "rb").read()
if data[:8] != b"\x89PNG\r\n\x1a\n":
    sys.exit(f"{png}: not a PNG file")
pos, idat, width, height, bitdepth, ctype = 8, b"", 0, 0, 0, 0
while pos < len(data):
    (n,) = struct.unpack(">I", data[pos:pos + 4])
    kind = data[pos + 4:pos + 8]
    body = data[pos + 8:pos + 8 + n]
    if kind == b"IHDR":
        width, height, bitdepth, ctype = struct.unpack(">IIBB", body[:10])
    elif kind == b"IDAT":
        idat += body
    pos += 12 + n
if bitdepth != 8 or ctype not in (2, 6):
    sys.exit(f"{png}: unexpected PNG format (bit depth {bitdepth}, colour type {ctype})")
bpp = 3 if ctype == 2 else 4
raw = zlib.decompress(idat)
stride = width * bpp
prev = bytearray(stride)
colours = set()
nonwhite = 0
for y in range(height):
    f = raw[y * (stride + 1)]
    line = bytearray(raw[y * (stride + 1) + 1:(y + 1) * (stride + 1)])
    for i in range(stride):
        a = line[i - bpp] if i >= bpp else 0
        b = prev[i]
        c = prev[i - bpp] if i >= bpp else 0
        if f == 1:
            line[i] = (line[i] + a) & 255
        elif f == 2:
            line[i] = (line[i] + b) & 255
        elif f == 3:
            line[i] = (line[i] + (a + b) // 2) & 255
        elif f == 4:
            p = a + b - c
            pa, pb, pc = abs(p - a), abs(p - b), abs(p - c)
            pr = a if pa <= pb and pa <= pc else (b if pb <= pc else c)
            line[i] = (line[i] + pr) & 255
    if y % 4 == 0:
        for x in range(0, width, 4):
            px = bytes(line[x * bpp:x * bpp + 3])
            colours.add(px)
            if px != b"\xff\xff\xff":
                nonwhite += 1
    prev = line
samples = (height // 4 + 1) * (width // 4 + 1)
print(f"  {page}: {width}x{height} px, {len(colours)} distinct colours, "
      f"{100.0 * nonwhite / samples:.1f} % not white", file=sys.stderr)
if len(colours) < 50:
    sys.exit(f"{png}: only {len(colours)} distinct colours: the page looks blank")
if nonwhite < samples * 0.02:
    sys.exit(f"{png}: almost everything is white")

dom = open(dom_path, encoding="utf-8").read()
if page == "family.html":
    # the family comparison: members, table, figures, definitions and cautions; no 3D view
    for s in ["id=\"members\"", "id=\"table\"", "id=\"figures\"", "id=\"definitions\"",
              "id=\"cautions\"", "<table"]:
        if s not in dom:
            sys.exit(f"{page}: the rendered DOM lacks {s}")
    nsvg = dom.count("<svg")
    if nsvg < 5:
        sys.exit(f"{page}: only {nsvg} inline svg elements (five figures expected)")
    import re
    sizes = [float(x) for x in re.findall(r'font-size="([0-9.]+)"', dom)]
    if sizes and min(sizes) < 11:
        sys.exit(f"{page}: figure text at {min(sizes)} px (at least 11 px expected)")
    print(f"  {page}: DOM has the sections and {nsvg} inline svg elements", file=sys.stderr)
    sys.exit(0)
need = ["id=\"answer\"", "id=\"cautions\"", "<table"]
if page != "report.html":
    need += ["id=\"structure\"", "id=\"channels\"", "id=\"landscape\"", "id=\"profiles\"",
             "id=\"transport\"", "id=\"capacity\"", "id=\"parameters\""]
for s in need:
    if s not in dom:
        sys.exit(f"{page}: the rendered DOM lacks {s}")
if page != "report.html":
    # The 3D view drew into its canvas: the script marks the canvas with the number of pixels
    # that differ from the background after the first frame (read back with gl.readPixels).
    import re
    if 'id="v3d-canvas"' in dom:
        if 'class="v3d webgl"' not in dom:
            sys.exit(f"{page}: the 3D view did not start (no WebGL, or the script failed)")
        m = re.search(r'data-drawn-pixels="(\d+)"', dom)
        if not m or int(m.group(1)) < 5000:
            sys.exit(f"{page}: the 3D canvas is blank ({m.group(1) if m else 'no'} drawn pixels)")
        print(f"  {page}: 3D canvas drew {m.group(1)} pixels", file=sys.stderr)
    elif 'id="view3d"' not in dom:
        sys.exit(f"{page}: the report has no 3D section")
nsvg = dom.count("<svg")
if page != "report.html" and nsvg < 3:
    sys.exit(f"{page}: only {nsvg} inline svg elements in the DOM")
print(f"  {page}: DOM has the sections and {nsvg} inline svg elements", file=sys.stderr)

if page != "report.html":
    # Figures as the browser holds them: no text under 11 px; one colour per element across
    # every figure of the page (legend swatch, then the element's name); slices labelled in
    # fractional coordinates.
    import re
    svgs = re.findall(r"<svg.*?</svg>", dom, re.S)
    sizes = [float(x) for x in re.findall(r'font-size="([0-9.]+)"', "".join(svgs))]
    if sizes and min(sizes) < 11:
        sys.exit(f"{page}: figure text at {min(sizes)} px (at least 11 px expected)")
    colour_of = {}
    for svg in svgs:
        for fill, name in re.findall(
                r'<circle[^>]*fill="(#[0-9a-fA-F]{6})"[^>]*>(?:</circle>)?\s*<text[^>]*>([A-Z][a-z]?)</text>', svg):
            if colour_of.setdefault(name, fill.lower()) != fill.lower():
                sys.exit(f"{page}: {name} is drawn in {colour_of[name]} and in {fill} in another figure")
    clash = {c for c in colour_of.values() if list(colour_of.values()).count(c) > 1}
    if clash:
        sys.exit(f"{page}: elements share a colour: {colour_of}")
    slices = [svg for svg in svgs if "clamped" in svg or "slice" in svg.lower()]
    for svg in slices:
        ticks = set(re.findall(r">(0\.25|0\.5|0\.75)<", svg))
        if not ticks:
            sys.exit(f"{page}: a slice without fractional-coordinate ticks")
    print(f"  {page}: figure text >= 11 px; element colours {colour_of}; "
          f"{len(slices)} slices with fractional ticks", file=sys.stderr)
EOF
done

end=$(date +%s)
echo "check_report: OK (${pages[*]}) in $((end - start)) s; screenshots in $OUT/" >&2
