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
        if (div.classList.contains("plot-heat") && div.on) {
          div.on("plotly_click", function (event) { onHeatmapClick(div, event); });
        }
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

  // The static table shares the x and y cells of a pair's rows (rowspan);
  // sorting moves rows one by one, so every row gets its own copies first.
  function splitSpans(table) {
    var rows = table.tBodies[0].rows;
    var carry = null;
    for (var i = 0; i < rows.length; i += 1) {
      var row = rows[i];
      if (carry && carry.left > 0) {
        row.insertBefore(carry.y.cloneNode(true), row.firstChild);
        row.insertBefore(carry.x.cloneNode(true), row.firstChild);
        carry.left -= 1;
        continue;
      }
      var first = row.cells[0];
      var span = first ? parseInt(first.getAttribute("rowspan") || "1", 10) : 1;
      if (span > 1) {
        first.removeAttribute("rowspan");
        row.cells[1].removeAttribute("rowspan");
        first.className = row.cells[1].className = "name";
        carry = { x: first, y: row.cells[1], left: span - 1 };
      }
    }
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
  // Two filters combine: free text matched against x and y, and one chosen
  // pair (from a heatmap click), matched exactly in either order.
  var filterState = { needle: "", pair: null, apply: null };

  function makeFilter(table) {
    var input = document.getElementById("pair-filter");
    var count = document.getElementById("pair-count");
    var chosen = document.getElementById("pair-chosen");
    if (!input) { return; }
    var tools = input.closest(".table-tools");
    if (tools) { tools.hidden = false; }
    var rows = Array.prototype.slice.call(table.tBodies[0].rows);
    function apply() {
      var needle = filterState.needle;
      var pair = filterState.pair;
      var shown = 0;
      rows.forEach(function (row) {
        var x = row.cells[0].textContent, y = row.cells[1].textContent;
        var hit = !needle || x.toLowerCase().indexOf(needle) >= 0 || y.toLowerCase().indexOf(needle) >= 0;
        if (hit && pair) { hit = (x === pair[0] && y === pair[1]) || (x === pair[1] && y === pair[0]); }
        row.hidden = !hit;
        if (hit) { shown += 1; }
      });
      if (chosen) {
        chosen.hidden = !pair;
        chosen.textContent = "";
        if (pair) {
          chosen.appendChild(document.createTextNode(pair[0] + " \u00d7 " + pair[1]));
          var clear = document.createElement("button");
          clear.type = "button";
          clear.textContent = "\u00d7";
          clear.title = "Show all pairs";
          clear.addEventListener("click", function () { filterState.pair = null; apply(); });
          chosen.appendChild(clear);
        }
      }
      if (count) { count.textContent = shown + " of " + rows.length + " rows"; }
    }
    input.addEventListener("input", function () { filterState.needle = input.value.trim().toLowerCase(); apply(); });
    filterState.apply = apply;
    apply();
  }

  function findCard(x, y) {
    var cards = document.querySelectorAll("article.card[data-x]");
    for (var k = 0; k < cards.length; k += 1) {
      var cx = cards[k].getAttribute("data-x"), cy = cards[k].getAttribute("data-y");
      if ((cx === x && cy === y) || (cx === y && cy === x)) { return cards[k]; }
    }
    return null;
  }

  // A click on a heatmap cell: the pair's card when it has one, else its rows.
  function onHeatmapClick(div, event) {
    var point = event && event.points && event.points[0];
    var names = div.layout && div.layout.meta && div.layout.meta.variables;
    if (!point || !names || !Array.isArray(point.pointNumber)) { return; }
    var y = names[point.pointNumber[0]], x = names[point.pointNumber[1]];
    if (x === undefined || y === undefined || x === y) { return; }
    var card = findCard(x, y);
    if (card) {
      card.scrollIntoView({ behavior: "smooth", block: "start" });
      card.classList.add("flash");
      window.setTimeout(function () { card.classList.remove("flash"); }, 1200);
      return;
    }
    filterState.pair = [x, y];
    if (filterState.apply) { filterState.apply(); }
    var section = document.getElementById("pair-table");
    if (section) { section.scrollIntoView({ behavior: "smooth", block: "start" }); }
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
    if (table) { splitSpans(table); makeSortable(table); makeFilter(table); }
    drawFigures();
    watchPrint();
  }

  if (document.readyState === "loading") {
    document.addEventListener("DOMContentLoaded", start);
  } else {
    start();
  }
}());
