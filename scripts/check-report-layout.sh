#!/usr/bin/env bash
# Check an aftercast report.html's layout on a phone-width screen with headless Chromium.
# Not part of `cargo test`.
#
#   scripts/check-report-layout.sh REPORT.html [WIDTH]
#
# WIDTH defaults to 390 (CSS px). Every <details> is opened first, so the folded parts are
# measured too. Checks:
#   (a) the page does not scroll sideways (document scrollWidth <= WIDTH); each table, table
#       wrapper, figure, pre, svg or img that sticks out past the right edge is named, and so is
#       each table wider than its own box unless it sits in an overflow-x:auto/scroll wrapper;
#   (b) no table row is taller than 200 px;
#   (c) chart text is readable: for each <text> in an inline <svg>, font-size times the svg's
#       rendered scale (rendered width / viewBox or width attribute) is at least 10 px.
# Prints one line per problem and exits 1, or one summary line and exits 0.
# Exits 2 on bad usage or when the check could not run. KEEP=1 keeps the temp folder (the
# instrumented copy, the framing page and Chromium's dumped DOM) and prints its path.
# Headless Chromium will not make a window narrower than 500 px, so the report is measured in
# an iframe WIDTH px wide; scrollbars are hidden, as on a phone.
# Needs Debian's `chromium` and python3; installs chromium with apt-get when missing (root only).
set -euo pipefail

if [ $# -lt 1 ] || [ $# -gt 2 ]; then
  echo "usage: $0 REPORT.html [WIDTH]" >&2
  exit 2
fi
report=$(readlink -f "$1")
[ -f "$report" ] || { echo "$0: $1: no such file" >&2; exit 2; }
width=${2:-390}
case $width in
  ''|*[!0-9]*) echo "$0: WIDTH must be a whole number of CSS pixels, not '$width'" >&2; exit 2 ;;
esac
[ "$width" -ge 200 ] || { echo "$0: WIDTH $width is too small (at least 200)" >&2; exit 2; }
command -v python3 >/dev/null || { echo "$0: python3 is not installed" >&2; exit 2; }

browser=$(command -v chromium || command -v chromium-browser || true)
if [ -z "$browser" ]; then
  if [ "$(id -u)" = 0 ]; then
    apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null
    browser=$(command -v chromium)
  else
    echo "$0: chromium is not installed (apt-get install -y chromium)" >&2
    exit 2
  fi
fi

work=$(mktemp -d)
trap '[ -n "${KEEP:-}" ] && echo "$work" >&2 || rm -rf "$work"' EXIT
mkdir "$work/profile"
page="$work/report.html"

# The measuring script: runs after load and posts its JSON to the framing page.
cat >"$work/measure.js" <<'JS'
(function () {
  function heading(el) {
    var hs = document.querySelectorAll('h1,h2,h3,h4,figcaption'), last = null;
    for (var i = 0; i < hs.length; i++) {
      if (hs[i] === el || hs[i].contains(el)) continue;
      if (hs[i].compareDocumentPosition(el) & Node.DOCUMENT_POSITION_FOLLOWING) last = hs[i]; else break;
    }
    return last ? last.textContent.replace(/\s+/g, ' ').trim().slice(0, 60) : '(top of page)';
  }
  function name(el) {
    var tag = el.tagName.toLowerCase();
    var n = Array.prototype.indexOf.call(document.getElementsByTagName(el.tagName), el) + 1;
    var cls = el.getAttribute('class') ? '.' + el.getAttribute('class').trim().split(/\s+/).join('.') : '';
    var label = el.getAttribute('aria-label');
    return tag + cls + ' #' + n + (label ? ' "' + label + '"' : '') + ' under "' + heading(el) + '"';
  }
  function scrollsX(el) {
    for (var p = el.parentElement; p && p !== document.body && p !== document.documentElement; p = p.parentElement) {
      var o = getComputedStyle(p).overflowX;
      if (o === 'auto' || o === 'scroll') return p;
    }
    return null;
  }
  function clipsX(el) {
    for (var p = el.parentElement; p && p !== document.body && p !== document.documentElement; p = p.parentElement) {
      var o = getComputedStyle(p).overflowX;
      if (o !== 'visible') return true;
    }
    return false;
  }
  function measure() {
    var ds = document.querySelectorAll('details');
    for (var i = 0; i < ds.length; i++) ds[i].open = true;
    var vw = window.innerWidth, out = {
      viewport: vw,
      page_width: document.documentElement.scrollWidth,
      sticking_out: [], wide_tables: [], tables: 0, tables_scrolling: 0,
      tall_rows: [], rows: 0, texts: 0, small_texts: 0, smallest_text: null,
      smallest_where: null, svgs: 0, svgs_unmeasured: 0
    };
    // (a) elements past the right edge that are not clipped by a scrolling/hidden ancestor.
    var boxes = document.querySelectorAll('table,.table-wrap,figure,pre,svg,img');
    for (var i = 0; i < boxes.length; i++) {
      var el = boxes[i];
      if (el.closest('svg') && el.closest('svg') !== el) continue; // nested svg parts
      var r = el.getBoundingClientRect();
      if (r.width === 0 && r.height === 0) continue;
      if (clipsX(el)) continue;
      // its box, or content spilling out of a box that does not clip (a long unbroken line in a <pre>)
      var spill = getComputedStyle(el).overflowX === 'visible' ? r.left + el.scrollWidth : r.right;
      var right = Math.max(r.right, spill);
      if (right > vw + 0.5) out.sticking_out.push({what: name(el), right: Math.round(right)});
    }
    // Something else widens the page: name the outermost elements past the edge (at most 5).
    if (document.documentElement.scrollWidth > vw && !out.sticking_out.length) {
      var all = document.body.querySelectorAll('*');
      for (var i = 0; i < all.length && out.sticking_out.length < 5; i++) {
        var el = all[i], r = el.getBoundingClientRect();
        if (r.right <= vw + 0.5 || clipsX(el) || (el.closest('svg') && el.tagName.toLowerCase() !== 'svg')) continue;
        var p = el.parentElement;
        if (p && p !== document.body && p.getBoundingClientRect().right > vw + 0.5) continue;
        out.sticking_out.push({what: name(el), right: Math.round(r.right)});
      }
    }
    var tables = document.querySelectorAll('table');
    out.tables = tables.length;
    for (var i = 0; i < tables.length; i++) {
      var t = tables[i], r = t.getBoundingClientRect();
      var box = t.parentElement ? t.parentElement.clientWidth : vw;
      var inner = Math.max(t.scrollWidth, Math.round(r.width));
      var visible = Math.min(t.clientWidth || r.width, box);
      if (inner > visible + 1) {
        if (scrollsX(t)) out.tables_scrolling++;
        else out.wide_tables.push({what: name(t), width: inner, box: Math.round(visible)});
      }
      // (b) tall rows
      var rows = t.rows;
      for (var j = 0; j < rows.length; j++) {
        out.rows++;
        var h = rows[j].getBoundingClientRect().height;
        if (h > 200) {
          var first = rows[j].cells.length ? rows[j].cells[0].textContent.replace(/\s+/g, ' ').trim() : '';
          // cells stretch to the row's height, so measure each cell's content instead
          var widest = '', wh = -1, range = document.createRange();
          for (var k = 0; k < rows[j].cells.length; k++) {
            range.selectNodeContents(rows[j].cells[k]);
            var ch = range.getBoundingClientRect().height;
            if (ch > wh) { wh = ch; widest = (t.rows[0] && t.rows[0].cells[k] ? t.rows[0].cells[k].textContent.trim() : 'column ' + (k + 1)); }
          }
          out.tall_rows.push({what: name(t), row: j + 1, height: Math.round(h),
                              first_cell: first.slice(0, 50), tallest_column: widest});
        }
      }
    }
    // (c) chart text size on screen.
    var svgs = document.querySelectorAll('svg');
    for (var i = 0; i < svgs.length; i++) {
      var s = svgs[i];
      if (s.parentElement && s.parentElement.closest('svg')) continue;
      // a drawing the page hides at this width (the desktop copy on a phone) is not read
      if (getComputedStyle(s).display === 'none') continue;
      out.svgs++;
      var rw = s.getBoundingClientRect().width, uw = 0;
      if (s.viewBox && s.viewBox.baseVal && s.viewBox.baseVal.width > 0) uw = s.viewBox.baseVal.width;
      else if (s.width && s.width.baseVal) uw = s.width.baseVal.value;
      if (!(rw > 0) || !(uw > 0)) { out.svgs_unmeasured++; continue; }
      var scale = rw / uw;
      var texts = s.querySelectorAll('text');
      for (var j = 0; j < texts.length; j++) {
        var fs = parseFloat(getComputedStyle(texts[j]).fontSize);
        if (!(fs > 0)) continue;
        var eff = fs * scale;
        out.texts++;
        if (eff < 10) out.small_texts++;
        if (out.smallest_text === null || eff < out.smallest_text) {
          out.smallest_text = eff;
          out.smallest_where = name(s) + ' (font-size ' + +fs.toFixed(2) + ' x scale ' + scale.toFixed(3) + ')';
        }
      }
    }
    out.page_width = document.documentElement.scrollWidth;
    parent.postMessage(JSON.stringify(out), '*');
  }
  // Measured synchronously at load (reading boxes forces layout): Chromium's virtual time may
  // dump the page before an animation frame or a font promise comes round.
  if (document.readyState === 'complete') measure(); else window.addEventListener('load', measure);
})();
JS

python3 - "$report" "$work/measure.js" "$page" <<'PY'
import html as H, pathlib, re, sys
src, js, dst = sys.argv[1:4]
html = open(src, encoding="utf-8", errors="replace").read()
# Relative links still resolve against the report's own folder.
base = '<base href="%s">' % H.escape(pathlib.Path(src).parent.as_uri() + "/")
m = re.search(r"<head[^>]*>", html, re.I)
html = html[:m.end()] + base + html[m.end():] if m else base + html
tag = "<script>\n" + open(js, encoding="utf-8").read() + "\n</script>\n"
i = html.lower().rfind("</body>")
html = html[:i] + tag + html[i:] if i >= 0 else html + tag
open(dst, "w", encoding="utf-8").write(html)
PY

# Chromium's headless window is at least 500 px wide, so the report is laid out in an iframe
# of exactly WIDTH px (its own viewport: media queries and innerWidth see WIDTH). The script in
# the report posts its JSON up; this page writes it into <pre id="layout-check">.
cat >"$work/frame.html" <<HTML
<!doctype html><html><head><meta charset="utf-8"></head><body style="margin:0">
<iframe src="report.html" style="display:block;width:${width}px;height:900px;border:0"></iframe>
<script>
addEventListener('message', function (e) {
  var pre = document.createElement('pre');
  pre.id = 'layout-check';
  pre.textContent = e.data;
  document.body.appendChild(pre);
});
</script></body></html>
HTML

"$browser" --headless --no-sandbox --disable-gpu \
  --disable-background-networking --disable-component-update --disable-sync \
  --no-first-run --user-data-dir="$work/profile" --hide-scrollbars \
  --window-size="$((width > 500 ? width + 20 : 520)),940" --virtual-time-budget=2000 \
  --dump-dom "file://$work/frame.html" >"$work/dom.html" 2>"$work/chromium.err" || {
    echo "$0: chromium failed:" >&2; tail -n 5 "$work/chromium.err" >&2; exit 2; }

python3 - "$work/dom.html" "$width" <<'PY'
import html, json, re, sys
dom, width = open(sys.argv[1], encoding="utf-8", errors="replace").read(), int(sys.argv[2])
m = re.search(r'<pre id="layout-check"[^>]*>(.*?)</pre>', dom, re.S)
if not m:
    print("check-report-layout: the measuring script did not run (no result in the dumped page)", file=sys.stderr)
    sys.exit(2)
r = json.loads(html.unescape(m.group(1)))
problems = []
vw = r["viewport"]
if vw != width:
    problems.append(f"viewport is {vw} px, not the {width} px asked for (Chromium window size)")
if r["page_width"] > vw:
    problems.append(f"page scrolls sideways: page width {r['page_width']} px > viewport {vw} px")
for s in r["sticking_out"]:
    problems.append(f"sticks out past the right edge (to {s['right']} px): {s['what']}")
for t in r["wide_tables"]:
    problems.append(f"table wider than its box with no sideways-scrolling wrapper ({t['width']} px in {t['box']} px): {t['what']}")
for t in r["tall_rows"]:
    problems.append(f"row {t['row']} is {t['height']} px tall (tallest cell in column \"{t['tallest_column']}\"; "
                    f"first cell \"{t['first_cell']}\"): {t['what']}")
small = r["smallest_text"]
if r["small_texts"]:
    problems.append(f"chart text below 10 px: {r['small_texts']} of {r['texts']} text elements; "
                    f"smallest {small:.1f} px in {r['smallest_where']}")
if r["svgs_unmeasured"]:
    problems.append(f"{r['svgs_unmeasured']} of {r['svgs']} svg charts could not be measured (zero width or no viewBox/width)")
for p in problems:
    print(p)
if problems:
    sys.exit(1)
scroll = f" ({r['tables_scrolling']} scroll sideways in their wrapper)" if r["tables_scrolling"] else ""
text = f"{small:.1f} px" if small is not None else "none (no chart text)"
print(f"layout at {width} px: page width {r['page_width']}, {r['tables']} tables{scroll}, smallest chart text {text}")
PY
