// The HTML report's filter bar: show findings by severity and layer, open linked groups.
(function () {
  var nav = document.getElementById('filters');
  if (!nav || !document.querySelectorAll) { return; }
  nav.hidden = false;
  function picked(name) {
    var on = {};
    var boxes = nav.querySelectorAll('input[name="' + name + '"]');
    for (var i = 0; i < boxes.length; i++) { if (boxes[i].checked) { on[boxes[i].value] = 1; } }
    return on;
  }
  function apply() {
    var sev = picked('severity'), lay = picked('layer'), shown = 0, locs = 0;
    var items = document.querySelectorAll('[data-severity][data-layer]');
    for (var i = 0; i < items.length; i++) {
      var el = items[i];
      var ok = sev[el.getAttribute('data-severity')] && lay[el.getAttribute('data-layer')];
      el.hidden = !ok;
      if (ok && el.classList.contains('group')) {
        shown++; locs += parseInt(el.getAttribute('data-count'), 10) || 0;
      }
    }
    var out = document.getElementById('shown');
    if (out) { out.textContent = shown + ' groups (' + locs + ' findings) shown'; }
  }
  // A link may preset the filter: report.html#severity=fail,risk&layer=metal1
  var hash = (window.location.hash || '').replace(/^#/, '');
  if (hash.indexOf('=') > 0) {
    var parts = hash.split('&');
    for (var p = 0; p < parts.length; p++) {
      var kv = parts[p].split('='), want = {}, vals = decodeURIComponent(kv[1] || '').split(',');
      for (var v = 0; v < vals.length; v++) { want[vals[v]] = 1; }
      var boxes = nav.querySelectorAll('input[name="' + kv[0] + '"]');
      for (var b = 0; b < boxes.length; b++) { boxes[b].checked = !!want[boxes[b].value]; }
    }
  }
  nav.addEventListener('change', apply);
  function openAll(state) {
    var gs = document.querySelectorAll('details.group');
    for (var i = 0; i < gs.length; i++) { if (!gs[i].hidden) { gs[i].open = state; } }
  }
  document.getElementById('expand').addEventListener('click', function () { openAll(true); });
  document.getElementById('collapse').addEventListener('click', function () { openAll(false); });
  function openTarget() {
    var id = (window.location.hash || '').replace(/^#/, '');
    var el = id && id.indexOf('=') < 0 ? document.getElementById(id) : null;
    if (el && el.tagName === 'DETAILS') { el.open = true; el.hidden = false; }
  }
  window.addEventListener('hashchange', openTarget);
  apply();
  openTarget();
  document.documentElement.setAttribute('data-filters', 'ready');
})();

// The index: a click on a column head sorts the rows by it (again: the other way);
// a link may preset the order: report.html#sort=pitch (or sort=-pitch, descending).
(function () {
  var tables = document.querySelectorAll ? document.querySelectorAll('table.sortable') : [];
  function key(cell) {
    var v = cell.getAttribute('data-v');
    var text = v !== null ? v : cell.textContent;
    var num = parseFloat(text.replace(/[^0-9eE+\-.]/g, ' ').trim().split(' ')[0]);
    return isNaN(num) ? text.toLowerCase() : num;
  }
  function sortBy(table, col, th, down) {
    var body = table.tBodies[0], rows = Array.prototype.slice.call(body.rows);
    var keyed = rows.map(function (r, i) { return [key(r.cells[col]), i, r]; });
    keyed.sort(function (a, b) {
      var x = a[0], y = b[0], c;
      if (typeof x !== typeof y) { return typeof x === 'number' ? -1 : 1; }  // dashes last
      c = x < y ? -1 : x > y ? 1 : 0;
      return (down ? -c : c) || a[1] - b[1];
    });
    var heads = table.tHead.rows[0].cells;
    for (var h = 0; h < heads.length; h++) { heads[h].removeAttribute('aria-sort'); }
    th.setAttribute('aria-sort', down ? 'descending' : 'ascending');
    var frag = document.createDocumentFragment();
    for (var k = 0; k < keyed.length; k++) { frag.appendChild(keyed[k][2]); }
    body.appendChild(frag);
  }
  for (var t = 0; t < tables.length; t++) {
    (function (table) {
      var heads = table.tHead.rows[0].cells;
      for (var c = 0; c < heads.length; c++) {
        (function (col, th) {
          th.addEventListener('click', function () {
            sortBy(table, col, th, th.getAttribute('aria-sort') === 'ascending');
          });
        })(c, heads[c]);
      }
    })(tables[t]);
  }
  var m = /(?:^#|&)sort=(-?)([a-z0-9]+)/.exec(window.location.hash || '');
  if (m && tables.length) {
    var heads = tables[0].tHead.rows[0].cells;
    for (var h = 0; h < heads.length; h++) {
      if (heads[h].getAttribute('data-key') === m[2]) { sortBy(tables[0], h, heads[h], m[1] === '-'); }
    }
  }
  document.documentElement.setAttribute('data-sorting', 'ready');
})();
