"""The report's style sheet and script, inline in every report (nothing is fetched)."""

INK = "#1c2b36"
ACCENT = "#1f6f78"

CSS = """
:root { --ink: %(ink)s; --accent: %(accent)s; --paper: #fbfaf7; --rule: #d9d4c7;
        --warn: #8a3a12; --warnbg: #fdf1e6; --cautionbg: #eef5f3; --muted: #5b6770; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--paper); color: var(--ink);
       font: 15px/1.45 "DejaVu Sans", "Liberation Sans", Arial, sans-serif; }
main { max-width: 1160px; margin: 0 auto; padding: 0 24px 48px; }
header.top { background: var(--ink); color: #f3f1ea; padding: 22px 24px 18px; }
header.top .inner { max-width: 1160px; margin: 0 auto; }
header.top h1 { margin: 0 0 4px; font-size: 26px; font-weight: 600; letter-spacing: .2px; }
header.top p { margin: 2px 0; color: #cfd8dc; }
h2 { font-size: 20px; margin: 34px 0 10px; padding-bottom: 4px;
     border-bottom: 2px solid var(--accent); }
h3 { font-size: 16px; margin: 18px 0 6px; color: var(--accent); }
p.note { color: var(--muted); font-size: 13.5px; margin: 4px 0 10px; }
.cautions { background: var(--cautionbg); border-left: 5px solid var(--accent);
            padding: 10px 16px; margin: 20px 0; }
.cautions h2 { border: none; margin: 4px 0; font-size: 17px; }
.cautions li { margin: 3px 0; }
.warnings { background: var(--warnbg); border-left: 5px solid var(--warn);
            padding: 8px 16px; margin: 10px 0; }
.warnings h3 { color: var(--warn); margin: 4px 0; }
.warnings li { margin: 3px 0; }
.ok { color: #3c6e47; }
.facts { display: grid; grid-template-columns: repeat(auto-fill, minmax(330px, 1fr));
         gap: 0 28px; margin: 8px 0; }
.facts div { display: flex; gap: 10px; border-bottom: 1px solid var(--rule); padding: 4px 0; }
.facts dt { flex: 0 0 150px; font-weight: 600; font-size: 13.5px; }
.facts dd { margin: 0; font-size: 13.5px; }
ul.products { columns: 2; font-size: 13.5px; padding-left: 18px; }
ul.products li.absent { color: var(--warn); }
table { border-collapse: collapse; width: 100%%; font-size: 13.5px; }
th, td { padding: 4px 8px; border-bottom: 1px solid var(--rule); text-align: left;
         vertical-align: top; }
th { background: #efece4; font-weight: 600; }
td.num, td.n { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.unit { color: var(--muted); white-space: nowrap; }
.tablebox { max-height: 640px; overflow: auto; border: 1px solid var(--rule); }
table.outlets { font-size: 12.5px; }
table.outlets th { position: sticky; top: 0; cursor: pointer; user-select: none;
                   vertical-align: bottom; }
table.outlets th[aria-sort="ascending"]::after { content: " \\25B2"; font-size: 9px; }
table.outlets th[aria-sort="descending"]::after { content: " \\25BC"; font-size: 9px; }
table.outlets td { white-space: nowrap; }
table.outlets tr.failed td { color: var(--warn); }
table.outlets td.w { color: var(--warn); }
.tools { display: flex; gap: 18px; align-items: center; margin: 6px 0; font-size: 13.5px; }
.tools input[type=search] { padding: 3px 6px; width: 240px; }
.outlet { margin-top: 26px; padding-top: 4px; border-top: 1px dashed var(--rule); }
.outlet .desc { color: #4a5861; margin: 0 0 8px; }
.pair { display: grid; grid-template-columns: 1fr 1fr; gap: 18px; align-items: start;
        margin-top: 12px; }
figure { margin: 0; }
.design { margin-top: 16px; }
.design figure img { max-width: 860px; }
.design h4 { font-size: 14px; margin: 14px 0 4px; }
table.design td.w, .design strong.w { color: var(--warn); }
table.design td.note { color: var(--muted); }
table.design.inputs th { width: 34%%; }
figure img { width: 100%%; height: auto; display: block; border: 1px solid var(--rule);
             background: white; }
figcaption { font-size: 12.5px; color: var(--muted); margin-top: 3px; }
nav.toc { columns: 3; font-size: 13.5px; margin: 6px 0 0; }
nav.toc a, table.outlets a { color: var(--accent); text-decoration: none; }
pre.params { background: #f2efe8; padding: 10px; font-size: 12px; overflow-x: auto;
             white-space: pre-wrap; word-break: break-all; }
code { font-size: 12.5px; }
footer { margin-top: 40px; font-size: 12.5px; color: #6b767e; }
@media (max-width: 860px) { .pair { grid-template-columns: 1fr; } nav.toc { columns: 1; }
                            ul.products { columns: 1; } }
@page { size: A4; margin: 14mm 12mm; }
@media print {
  body { background: white; font-size: 10.5pt; }
  header.top { background: white; color: var(--ink); border-bottom: 2px solid var(--ink);
               padding: 0 0 6px; }
  header.top p { color: #333; }
  main { max-width: none; padding: 0; }
  nav.toc, .tools { display: none; }
  .tablebox { max-height: none; overflow: visible; border: none; }
  .outlet { break-before: page; border-top: none; }
  .pair { grid-template-columns: 1fr 1fr; }
  figure, .warnings, .cautions { break-inside: avoid; }
  a { color: inherit; text-decoration: none; }
}
""" % {"ink": INK, "accent": ACCENT}

# Sorting and filtering of the outlet table: plain JavaScript, no library. A click on a
# heading sorts by that column (again: the other way); cells carry their raw value in
# data-v; empty values sort last either way; ties keep the table's first order.
SCRIPT = """
(function () {
  var table = document.getElementById('outlet-table');
  if (!table) { return; }
  var body = table.tBodies[0];
  var rows = Array.prototype.slice.call(body.rows);
  var heads = table.tHead.rows[0].cells;
  function value(row, i, numeric) {
    var cell = row.cells[i];
    var raw = cell.getAttribute('data-v');
    if (numeric) {
      var x = parseFloat(raw);
      return isNaN(x) ? null : x;
    }
    return (raw !== null ? raw : cell.textContent).toLowerCase();
  }
  function sortBy(i) {
    var head = heads[i];
    var numeric = head.getAttribute('data-type') === 'num';
    var dir = head.getAttribute('aria-sort') === 'ascending' ? -1 : 1;
    for (var k = 0; k < heads.length; k++) { heads[k].removeAttribute('aria-sort'); }
    head.setAttribute('aria-sort', dir === 1 ? 'ascending' : 'descending');
    var keyed = rows.map(function (r, k) { return [value(r, i, numeric), k, r]; });
    keyed.sort(function (a, b) {
      if (a[0] === null || b[0] === null) {
        if (a[0] === b[0]) { return a[1] - b[1]; }
        return a[0] === null ? 1 : -1;
      }
      if (a[0] < b[0]) { return -dir; }
      if (a[0] > b[0]) { return dir; }
      return a[1] - b[1];
    });
    var frag = document.createDocumentFragment();
    keyed.forEach(function (x) { frag.appendChild(x[2]); });
    body.appendChild(frag);
  }
  Array.prototype.forEach.call(heads, function (head, i) {
    head.setAttribute('title', 'sort by this column');
    head.addEventListener('click', function () { sortBy(i); });
  });
  var box = document.getElementById('outlet-filter');
  var only = document.getElementById('outlet-warned');
  var count = document.getElementById('outlet-count');
  function filter() {
    var q = box ? box.value.toLowerCase() : '';
    var shown = 0;
    rows.forEach(function (r) {
      var hit = r.cells[0].textContent.toLowerCase().indexOf(q) >= 0;
      if (only && only.checked) { hit = hit && r.getAttribute('data-warned') === '1'; }
      r.style.display = hit ? '' : 'none';
      if (hit) { shown += 1; }
    });
    if (count) { count.textContent = shown + ' of ' + rows.length + ' shown'; }
  }
  if (box) { box.addEventListener('input', filter); }
  if (only) { only.addEventListener('change', filter); }
  window.basinkitSortOutlets = sortBy;
})();
"""
