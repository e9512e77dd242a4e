/* pairlens report: hover and click on the maps, a sortable and filterable pair table.
   Runs with no network; everything it needs is in the page. */
(function () {
  "use strict";

  function readJson(id) {
    var holder = document.getElementById(id);
    if (!holder) { return {}; }
    try { return JSON.parse(holder.textContent); } catch (err) { return {}; }
  }

  // The figures are static SVG in the page; the script adds the maps' hover text and
  // click. A cell is found from the pointer's place in the map's grid, whose place in
  // the SVG's viewBox the data-map-* attributes give.
  var hover = null;

  function cellOf(svg, event) {
    var box = svg.getBoundingClientRect();
    var view = svg.viewBox.baseVal;
    if (!view || !box.width || !box.height) { return null; }
    var left = parseFloat(svg.getAttribute("data-map-left"));
    var top = parseFloat(svg.getAttribute("data-map-top"));
    var side = parseFloat(svg.getAttribute("data-map-side"));
    var k = parseInt(svg.getAttribute("data-map-k"), 10);
    var vx = (event.clientX - box.left) * view.width / box.width;
    var vy = (event.clientY - box.top) * view.height / box.height;
    var j = Math.floor((vx - left) / side * k), i = Math.floor((vy - top) / side * k);
    if (i < 0 || j < 0 || i >= k || j >= k || i === j) { return null; }
    return { i: i, j: j, k: k };
  }

  function tipLines(id, c) {
    var map = hover.maps[id];
    var names = hover.variables;
    if (!map) { return null; }
    // symmetric maps keep the upper triangle only (i < j), row by row
    var a = Math.min(c.i, c.j), b = Math.max(c.i, c.j);
    var cell = map.symmetric ? map.cells[a * c.k - a * (a + 1) / 2 + (b - a - 1)] : map.cells[c.i * c.k + c.j];
    if (!cell) { return null; }
    var rowName = names[c.i], colName = names[c.j];
    if (map.difference) {
      return [colName + " \u00d7 " + rowName,
              map.labels[0] + " " + cell[0] + " · " + map.labels[1] + " " + cell[1],
              "difference " + cell[2]];
    }
    var head = map.symmetric ? colName + " \u00d7 " + rowName : rowName + " \u2192 " + colName;
    return [head, map.label + " " + cell[0], "p " + cell[1] + " · q " + cell[2] + " · n " + cell[3]];
  }

  function wireMaps() {
    hover = readJson("pl-hover");
    var tip = document.getElementById("map-tip");
    var holders = document.querySelectorAll("[data-map]");
    if (!hover.maps || !tip) { return 0; }
    Array.prototype.forEach.call(holders, function (holder) {
      var id = holder.getAttribute("data-map");
      var svg = holder.querySelector("svg");
      if (!svg) { return; }
      svg.addEventListener("mousemove", function (event) {
        var c = cellOf(svg, event);
        var lines = c && tipLines(id, c);
        if (!lines) { tip.hidden = true; svg.style.cursor = ""; return; }
        tip.textContent = "";
        lines.forEach(function (line, n) {
          var row = document.createElement(n === 0 ? "strong" : "span");
          row.textContent = line;
          tip.appendChild(row);
        });
        tip.hidden = false;
        tip.style.left = Math.max(4, Math.min(event.clientX + 14, window.innerWidth - tip.offsetWidth - 8)) + "px";
        tip.style.top = (event.clientY + 14) + "px";
        svg.style.cursor = "pointer";
      });
      svg.addEventListener("mouseleave", function () { tip.hidden = true; });
      svg.addEventListener("click", function (event) {
        var c = cellOf(svg, event);
        if (!c) { return; }
        tip.hidden = true;
        onCellClick(hover.variables[c.j], hover.variables[c.i]);
      });
      holder.classList.add("drawn");
    });
    return holders.length;
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
  function onCellClick(x, y) {
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

  function start() {
    document.documentElement.classList.add("js");
    var table = document.getElementById("pairs");
    if (table) { splitSpans(table); makeSortable(table); makeFilter(table); }
    wireMaps();
    document.body.setAttribute("data-figures", String(document.querySelectorAll("svg.svg-fig").length));
  }

  if (document.readyState === "loading") {
    document.addEventListener("DOMContentLoaded", start);
  } else {
    start();
  }
}());
