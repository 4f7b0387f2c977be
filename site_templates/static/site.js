/* specfold site: channel table sort and filter, and chart drawing. No framework, no network. */
(function () {
  "use strict";

  var STATUS_ORDER = { error: 0, warning: 1, ok: 2 };

  function cellKey(row, index, type) {
    var cell = row.cells[index];
    var raw = cell.hasAttribute("data-sort") ? cell.getAttribute("data-sort") : cell.textContent.trim();
    if (type === "num") {
      var n = parseFloat(raw);
      return isNaN(n) ? null : n;
    }
    if (type === "status") {
      return raw in STATUS_ORDER ? STATUS_ORDER[raw] : 3;
    }
    return raw.toLowerCase();
  }

  function sortTable(table, th) {
    var index = th.cellIndex;
    var type = th.getAttribute("data-type") || "text";
    var ascending = th.getAttribute("aria-sort") !== "ascending";
    var headers = table.tHead.rows[0].cells;
    for (var i = 0; i < headers.length; i++) headers[i].removeAttribute("aria-sort");
    th.setAttribute("aria-sort", ascending ? "ascending" : "descending");
    var body = table.tBodies[0];
    var rows = Array.prototype.slice.call(body.rows);
    rows.forEach(function (r, i) { r._order = i; });
    rows.sort(function (a, b) {
      var x = cellKey(a, index, type), y = cellKey(b, index, type);
      if (x === null && y === null) return a._order - b._order;
      if (x === null) return 1;  // blanks last either way
      if (y === null) return -1;
      var c = x < y ? -1 : x > y ? 1 : 0;
      return (ascending ? c : -c) || a._order - b._order;
    });
    var frag = document.createDocumentFragment();
    rows.forEach(function (r) { frag.appendChild(r); });
    body.appendChild(frag);
  }

  function applyFilter(form) {
    var table = document.getElementById(form.getAttribute("data-table"));
    if (!table) return;
    var q = form.elements.q.value.trim().toLowerCase();
    var kind = form.elements.kind.value;
    var status = form.elements.status.value;
    var rows = table.tBodies[0].rows, shown = 0;
    for (var i = 0; i < rows.length; i++) {
      var r = rows[i];
      var ok = (!kind || r.getAttribute("data-kind") === kind) &&
               (!status || r.getAttribute("data-status") === status) &&
               (!q || r.textContent.toLowerCase().indexOf(q) !== -1);
      r.hidden = !ok;
      if (ok) shown++;
    }
    if (form.elements.shown) form.elements.shown.value = shown + " of " + rows.length;
  }

  function drawCharts() {
    if (typeof window.Plotly === "undefined") return;
    var boxes = document.querySelectorAll("div.chart[data-figure]");
    for (var i = 0; i < boxes.length; i++) {
      var holder = document.getElementById(boxes[i].getAttribute("data-figure"));
      if (!holder) continue;
      var fig = JSON.parse(holder.textContent);
      window.Plotly.newPlot(boxes[i], fig.data, fig.layout, { displaylogo: false, responsive: true });
    }
  }

  document.addEventListener("DOMContentLoaded", function () {
    var tables = document.querySelectorAll("table.sortable");
    Array.prototype.forEach.call(tables, function (table) {
      Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th) {
        th.tabIndex = 0;
        th.addEventListener("click", function () { sortTable(table, th); });
        th.addEventListener("keydown", function (e) {
          if (e.key === "Enter" || e.key === " ") { e.preventDefault(); sortTable(table, th); }
        });
      });
    });
    var forms = document.querySelectorAll("form.filters");
    Array.prototype.forEach.call(forms, function (form) {
      form.addEventListener("input", function () { applyFilter(form); });
      form.addEventListener("submit", function (e) { e.preventDefault(); });
    });
    drawCharts();
  });
})();
