/* pairlens report: draw the figures and make the pair table sortable.
   Runs with no network; everything it needs is in the page. */
(function () {
  "use strict";

  function readJson(id) {
    var holder = document.getElementById(id);
    if (!holder) { return {}; }
    try { return JSON.parse(holder.textContent); } catch (err) { return {}; }
  }

  // A scatter stores {"$column": key, "$extra": [...]} for x and y and
  // {"$rows": true, "$extra": [...]} for its row numbers: each column's sampled
  // values are in the page once, shared by every scatter that uses it.
  function resolvePoints(fig, store) {
    (fig.data || []).forEach(function (trace) {
      ["x", "y", "customdata"].forEach(function (key) {
        var ref = trace[key];
        if (!ref || typeof ref !== "object" || Array.isArray(ref)) { return; }
        var base = null;
        if (ref["$rows"]) { base = store.rows; }
        else if (ref["$column"] !== undefined) { base = (store.values || {})[ref["$column"]]; }
        if (!base) { return; }
        trace[key] = base.concat(ref["$extra"] || []);
      });
    });
    return fig;
  }

  function drawFigures() {
    var done = [];
    var figures = readJson("pl-figures");
    var store = readJson("pl-points");
    var divs = document.querySelectorAll("[data-figure]");
    if (!window.Plotly) {
      document.body.setAttribute("data-figures", "unavailable");
      return;
    }
    Array.prototype.forEach.call(divs, function (div) {
      var fig = figures[div.getAttribute("data-figure")];
      if (!fig) { return; }
      var config = { displaylogo: false, responsive: true, scrollZoom: false,
                     modeBarButtonsToRemove: ["sendDataToCloud", "lasso2d", "select2d"] };
      fig = resolvePoints(fig, store);
      done.push(Plotly.newPlot(div, fig.data || [], fig.layout || {}, config).then(function () {
        div.classList.add("drawn");
      }));
    });
    Promise.all(done).then(function () {
      document.body.setAttribute("data-figures", String(done.length));
    }, function () {
      document.body.setAttribute("data-figures", "failed");
    });
  }

  // Sorting --------------------------------------------------------------
  function cellKey(cell, type) {
    if (type === "num") {
      var raw = cell.hasAttribute("data-v") ? cell.getAttribute("data-v") : cell.textContent;
      var v = parseFloat(raw);
      return isNaN(v) ? null : v;
    }
    return cell.textContent.toLowerCase();
  }

  function sortBy(table, index, type, header) {
    var body = table.tBodies[0];
    var dir = header.getAttribute("aria-sort") === "ascending" ? "descending" : "ascending";
    var sign = dir === "ascending" ? 1 : -1;
    var rows = Array.prototype.slice.call(body.rows);
    var keyed = rows.map(function (row, pos) { return { row: row, pos: pos, key: cellKey(row.cells[index], type) }; });
    keyed.sort(function (a, b) {
      // missing values stay last whichever way the column is sorted
      if (a.key === null && b.key === null) { return a.pos - b.pos; }
      if (a.key === null) { return 1; }
      if (b.key === null) { return -1; }
      if (a.key < b.key) { return -sign; }
      if (a.key > b.key) { return sign; }
      return a.pos - b.pos;
    });
    var frag = document.createDocumentFragment();
    keyed.forEach(function (k) { frag.appendChild(k.row); });
    body.appendChild(frag);
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th) { th.removeAttribute("aria-sort"); });
    header.setAttribute("aria-sort", dir);
  }

  function makeSortable(table) {
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th, index) {
      var label = th.textContent;
      var button = document.createElement("button");
      button.type = "button";
      button.className = "sort";
      button.textContent = label;
      button.title = "Sort by " + label;
      th.textContent = "";
      th.appendChild(button);
      button.addEventListener("click", function () {
        sortBy(table, index, th.getAttribute("data-type") || "text", th);
      });
    });
  }

  // Filtering ------------------------------------------------------------
  function makeFilter(table) {
    var input = document.getElementById("pair-filter");
    var count = document.getElementById("pair-count");
    if (!input) { return; }
    var tools = input.closest(".table-tools");
    if (tools) { tools.hidden = false; }
    var rows = Array.prototype.slice.call(table.tBodies[0].rows);
    function apply() {
      var needle = input.value.trim().toLowerCase();
      var shown = 0;
      rows.forEach(function (row) {
        var hit = !needle || row.cells[0].textContent.toLowerCase().indexOf(needle) >= 0 ||
          row.cells[1].textContent.toLowerCase().indexOf(needle) >= 0;
        row.hidden = !hit;
        if (hit) { shown += 1; }
      });
      if (count) { count.textContent = shown + " of " + rows.length + " rows"; }
    }
    input.addEventListener("input", apply);
    apply();
  }

  // Figures are laid out for the screen; paper is narrower or wider, so redraw
  // them at their printed size and back again afterwards.
  function resizeFigures() {
    if (!window.Plotly) { return; }
    Array.prototype.forEach.call(document.querySelectorAll(".plot.drawn"), function (div) {
      Plotly.Plots.resize(div);
    });
  }

  function watchPrint() {
    window.addEventListener("beforeprint", resizeFigures);
    window.addEventListener("afterprint", resizeFigures);
    if (window.matchMedia) {
      var query = window.matchMedia("print");
      var onChange = function () { resizeFigures(); };
      if (query.addEventListener) { query.addEventListener("change", onChange); }
      else if (query.addListener) { query.addListener(onChange); }
    }
  }

  function start() {
    document.documentElement.classList.add("js");
    var table = document.getElementById("pairs");
    if (table) { makeSortable(table); makeFilter(table); }
    drawFigures();
    watchPrint();
  }

  if (document.readyState === "loading") {
    document.addEventListener("DOMContentLoaded", start);
  } else {
    start();
  }
}());
