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

  // ---- The data-driven channel table ----------------------------------------------------------
  // The overview writes its first rows as HTML and every row as JSON (<script type="application/json">,
  // columns in ROW_FIELDS order, as generator/render.py writes them).  Sort and filter work on the
  // array; the table shows the first CHUNK rows of the result, more on demand, all before printing.

  var F = { id: 0, href: 1, title: 2, kind: 3, band: 4, band_sort: 5, rate: 6, rate_sort: 7, bits: 8,
            filter: 9, data_rate: 10, data_rate_sort: 11, status: 12 };
  // Per column: the field shown, the field sorted on (data-sort), a CSS class.
  var COLUMNS = [
    { show: F.id, link: F.href }, { show: F.title }, { show: F.kind },
    { show: F.band, sort: F.band_sort, cls: "num" }, { show: F.rate, sort: F.rate_sort, cls: "num" },
    { show: F.bits, sort: F.bits, cls: "num" }, { show: F.filter },
    { show: F.data_rate, sort: F.data_rate_sort, cls: "num" }, { show: F.status, sort: F.status, badge: true }
  ];
  var CHUNK = 100;  // unless the table says (data-chunk: the rows the page wrote as HTML)

  function keyOf(raw, type) {
    if (type === "num") {
      var n = parseFloat(raw);
      return isNaN(n) ? null : n;
    }
    if (type === "status") return raw in STATUS_ORDER ? STATUS_ORDER[raw] : 3;
    return raw.trim().toLowerCase();
  }

  function makeRow(r) {
    var tr = document.createElement("tr");
    tr.setAttribute("data-kind", r[F.kind]);
    tr.setAttribute("data-status", r[F.status]);
    for (var c = 0; c < COLUMNS.length; c++) {
      var col = COLUMNS[c], td = document.createElement("td");
      if (col.cls) td.className = col.cls;
      if (col.sort !== undefined) td.setAttribute("data-sort", r[col.sort]);
      if (col.link !== undefined) {
        var a = document.createElement("a");
        a.href = r[col.link];
        a.textContent = r[col.show];
        td.appendChild(a);
      } else if (col.badge) {
        var span = document.createElement("span");
        span.className = "badge badge-" + r[col.show];
        span.textContent = r[col.show];
        td.appendChild(span);
      } else {
        td.textContent = r[col.show];
      }
      tr.appendChild(td);
    }
    return tr;
  }

  function DataTable(table, rows, form) {
    this.table = table;
    this.rows = rows;
    this.form = form;
    this.order = rows.map(function (_, i) { return i; });  // every row, in the current sort order
    this.view = this.order;                                 // the rows that pass the filter
    this.shown = Math.min(table.tBodies[0].rows.length, rows.length);  // already written as HTML
    this.hay = null;
    this.trs = new Array(rows.length);  // each row's element, made once and reused
    for (var i = 0; i < this.shown; i++) this.trs[i] = table.tBodies[0].rows[i];
    this.more = document.getElementById(table.id + "-more");
    this.buildMore();
    this.update();
  }

  DataTable.prototype.haystack = function () {
    if (this.hay === null) {
      this.hay = this.rows.map(function (r) {
        var parts = [];
        for (var c = 0; c < COLUMNS.length; c++) parts.push(r[COLUMNS[c].show]);
        return parts.join("\n").toLowerCase();
      });
    }
    return this.hay;
  };

  DataTable.prototype.filter = function () {
    var f = this.form, rows = this.rows;
    var q = f ? f.elements.q.value.trim().toLowerCase() : "";
    var kind = f ? f.elements.kind.value : "", status = f ? f.elements.status.value : "";
    if (!q && !kind && !status) {
      this.view = this.order;
    } else {
      var hay = q ? this.haystack() : null, out = [];
      for (var i = 0; i < this.order.length; i++) {
        var k = this.order[i], r = rows[k];
        if ((!kind || r[F.kind] === kind) && (!status || r[F.status] === status) &&
            (!q || hay[k].indexOf(q) !== -1)) out.push(k);
      }
      this.view = out;
    }
    this.render(CHUNK);
  };

  DataTable.prototype.sort = function (th) {
    var index = th.cellIndex, col = COLUMNS[index];
    var type = th.getAttribute("data-type") || "text";
    var ascending = th.getAttribute("aria-sort") !== "ascending";
    var headers = this.table.tHead.rows[0].cells;
    for (var i = 0; i < headers.length; i++) headers[i].removeAttribute("aria-sort");
    th.setAttribute("aria-sort", ascending ? "ascending" : "descending");
    var field = col.sort !== undefined ? col.sort : col.show, rows = this.rows;
    var keyed = this.order.map(function (k, pos) { return { k: k, pos: pos, key: keyOf(rows[k][field], type) }; });
    keyed.sort(function (a, b) {
      var x = a.key, y = b.key;
      if (x === null && y === null) return a.pos - b.pos;
      if (x === null) return 1;  // blanks last either way
      if (y === null) return -1;
      var c = x < y ? -1 : x > y ? 1 : 0;
      return (ascending ? c : -c) || a.pos - b.pos;  // stable: ties keep the previous order
    });
    this.order = keyed.map(function (e) { return e.k; });
    this.filter();
  };

  DataTable.prototype.tr = function (k) {
    return this.trs[k] || (this.trs[k] = makeRow(this.rows[k]));
  };

  DataTable.prototype.render = function (count) {
    var n = Math.min(count, this.view.length), frag = document.createDocumentFragment();
    for (var i = 0; i < n; i++) frag.appendChild(this.tr(this.view[i]));
    var body = this.table.tBodies[0];
    body.textContent = "";
    body.appendChild(frag);
    this.shown = n;
    this.update();
  };

  DataTable.prototype.extend = function (count) {
    var n = Math.min(this.shown + count, this.view.length), frag = document.createDocumentFragment();
    for (var i = this.shown; i < n; i++) frag.appendChild(this.tr(this.view[i]));
    this.table.tBodies[0].appendChild(frag);
    this.shown = n;
    this.update();
  };

  DataTable.prototype.buildMore = function () {
    if (!this.more) return;
    var self = this;
    this.moreText = document.createElement("span");
    this.moreButton = document.createElement("button");
    this.moreButton.type = "button";
    this.moreButton.addEventListener("click", function () { self.extend(CHUNK); });
    this.allButton = document.createElement("button");
    this.allButton.type = "button";
    this.allButton.addEventListener("click", function () { self.extend(Infinity); });
    this.more.textContent = "";
    this.more.appendChild(this.moreText);
    this.more.appendChild(document.createTextNode(" "));
    this.more.appendChild(this.moreButton);
    this.more.appendChild(document.createTextNode(" "));
    this.more.appendChild(this.allButton);
  };

  DataTable.prototype.update = function () {
    var total = this.rows.length, matching = this.view.length;
    if (this.form && this.form.elements.shown) this.form.elements.shown.value = matching + " of " + total;
    // assistive technology hears the full size of the list, not only the rows written so far
    this.table.setAttribute("aria-rowcount", String(matching + 1));
    if (!this.more) return;
    var rest = matching - this.shown;
    this.more.hidden = rest <= 0;
    if (rest > 0) {
      this.moreText.textContent = "Showing " + this.shown + " of " + matching + " channels.";
      this.moreButton.textContent = "Show " + Math.min(CHUNK, rest) + " more";
      this.allButton.textContent = "Show all " + matching;
    }
  };

  function setUpDataTable(table, form) {
    var holder = document.getElementById(table.getAttribute("data-rows"));
    if (!holder) return false;
    var rows;
    try { rows = JSON.parse(holder.textContent); } catch (e) { return false; }
    if (!Array.isArray(rows)) return false;
    var chunk = parseInt(table.getAttribute("data-chunk") || "", 10);
    if (chunk > 0) CHUNK = chunk;
    var dt = new DataTable(table, rows, form);
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th) {
      th.tabIndex = 0;
      th.addEventListener("click", function () { dt.sort(th); });
      th.addEventListener("keydown", function (e) {
        if (e.key === "Enter" || e.key === " ") { e.preventDefault(); dt.sort(th); }
      });
    });
    if (form) {
      form.addEventListener("input", function () { dt.filter(); });
      form.addEventListener("submit", function (e) { e.preventDefault(); });
      // a form the browser restored (back button) filters the table it comes back to
      if (form.elements.q.value || form.elements.kind.value || form.elements.status.value) dt.filter();
    }
    // print every matching row, not only the ones shown so far
    window.addEventListener("beforeprint", function () { dt.extend(Infinity); });
    table.setAttribute("data-ready", "");
    return true;
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
    var forms = document.querySelectorAll("form.filters"), formFor = {};
    Array.prototype.forEach.call(forms, function (form) { formFor[form.getAttribute("data-table")] = form; });
    var tables = document.querySelectorAll("table.sortable");
    Array.prototype.forEach.call(tables, function (table) {
      var form = formFor[table.id] || null;
      if (table.hasAttribute("data-rows") && setUpDataTable(table, form)) return;
      Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th) {
        th.tabIndex = 0;
        th.addEventListener("click", function () { sortTable(table, th); });
        th.addEventListener("keydown", function (e) {
          if (e.key === "Enter" || e.key === " ") { e.preventDefault(); sortTable(table, th); }
        });
      });
      if (form) {
        form.addEventListener("input", function () { applyFilter(form); });
        form.addEventListener("submit", function (e) { e.preventDefault(); });
      }
    });
    drawCharts();
  });
})();
