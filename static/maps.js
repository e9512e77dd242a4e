/* pairlens analysis page: canvas maps of every measure beside the scatter of the chosen pair,
   and the pair table served page by page. Plain JS, no Plotly here: a canvas draws a
   300 x 300 map in a few milliseconds. Text reaches the DOM only through textContent. */
(function () {
  "use strict";

  var P = window.pairlens || {};
  var fmt = P.fmt, fmtEst = P.fmtEst, fmtP = P.fmtP, fmtCount = P.fmtCount;
  function $(id) { return document.getElementById(id); }
  // "2nd", "3rd", "11th", "21st": the English ordinal of a label step
  function ordinal(n) {
    var tens = n % 100, ones = n % 10;
    if (tens >= 11 && tens <= 13) return n + "th";
    return n + (ones === 1 ? "st" : ones === 2 ? "nd" : ones === 3 ? "rd" : "th");
  }
  function el(tag, attrs, text) {
    var node = document.createElement(tag);
    if (attrs) Object.keys(attrs).forEach(function (k) { node.setAttribute(k, attrs[k]); });
    if (text !== undefined && text !== null) node.textContent = text;
    return node;
  }
  function readJSON(id) { var n = $(id); return n ? JSON.parse(n.textContent) : null; }

  var analysisId = (function () {
    var m = window.location.pathname.match(/^\/analyses\/([^/]+)/);
    return m ? decodeURIComponent(m[1]) : null;
  })();
  function api(path, params) {
    return "/api/analyses/" + encodeURIComponent(analysisId) + path +
      (params ? "?" + new URLSearchParams(params).toString() : "");
  }

  /* Colours ---------------------------------------------------------------------------- */
  function parseColour(c) {
    var m = String(c).match(/rgba?\(([^)]+)\)/);
    if (m) return m[1].split(",").slice(0, 3).map(function (v) { return parseFloat(v); });
    var h = String(c).replace("#", "");
    return [parseInt(h.substr(0, 2), 16), parseInt(h.substr(2, 2), 16), parseInt(h.substr(4, 2), 16)];
  }
  function lut(stops) {
    var s = stops.map(function (st) { return [st[0]].concat(parseColour(st[1])); });
    var out = new Uint8ClampedArray(256 * 3);
    for (var i = 0; i < 256; i++) {
      var t = i / 255, k = 1;
      while (k < s.length - 1 && s[k][0] < t) k++;
      var a = s[k - 1], b = s[k], f = b[0] > a[0] ? (t - a[0]) / (b[0] - a[0]) : 0;
      for (var c = 0; c < 3; c++) out[i * 3 + c] = Math.round(a[c + 1] + f * (b[c + 1] - a[c + 1]));
    }
    return out;
  }
  var PALE = 0.6;            // share of white mixed into a cell that is not significant
  var DIAG = [233, 230, 223], MISSING = [214, 210, 202];

  /* Data ------------------------------------------------------------------------------- */
  var data = readJSON("heatmap-data");
  if (!data || !data.maps) return;
  var vars = data.variables, k = vars.length, alpha = data.alpha;
  var index = {};
  vars.forEach(function (v, i) { index[v] = i; });

  function expand(list, symmetric) {
    var out = new Float32Array(k * k);
    out.fill(NaN);
    if (!list) return null;
    var t = 0, i, j, v;
    if (symmetric) {
      for (i = 0; i < k; i++) for (j = i + 1; j < k; j++) {
        v = list[t++];
        if (v !== null) { out[i * k + j] = v; out[j * k + i] = v; }
      }
    } else {
      for (t = 0; t < k * k; t++) if (list[t] !== null) out[t] = list[t];
    }
    return out;
  }

  var maps = {};
  data.maps.forEach(function (m) {
    m.E = expand(m.est, m.symmetric);
    m.Q = m.q ? expand(m.q, m.symmetric) : null;
    m.lut = lut(m.stops);
    m.est = m.q = null;
    maps[m.key] = m;
  });

  function image(m) {  // one pixel per cell, drawn scaled without smoothing
    if (m.image) return m.image;
    var c = document.createElement("canvas");
    c.width = k; c.height = k;
    var ctx = c.getContext("2d"), img = ctx.createImageData(k, k), px = img.data;
    var E = m.E, Q = m.Q, L = m.lut, lo = m.lo, scale = 255 / (m.hi - m.lo);
    for (var i = 0; i < k; i++) for (var j = 0; j < k; j++) {
      var at = i * k + j, o = at * 4, v = E[at], r, g, b;
      if (i === j) { r = DIAG[0]; g = DIAG[1]; b = DIAG[2]; }
      else if (v !== v) { r = MISSING[0]; g = MISSING[1]; b = MISSING[2]; }
      else {
        var t = Math.round((v - lo) * scale);
        t = t < 0 ? 0 : (t > 255 ? 255 : t);
        r = L[t * 3]; g = L[t * 3 + 1]; b = L[t * 3 + 2];
        if (Q && !(Q[at] < alpha)) { r += (255 - r) * PALE; g += (255 - g) * PALE; b += (255 - b) * PALE; }
      }
      px[o] = r; px[o + 1] = g; px[o + 2] = b; px[o + 3] = 255;
    }
    ctx.putImageData(img, 0, 0);
    m.image = c;
    return c;
  }

  function sizeCanvas(canvas, w, h) {
    var dpr = window.devicePixelRatio || 1;
    canvas.style.width = w + "px"; canvas.style.height = h + "px";
    canvas.width = Math.round(w * dpr); canvas.height = Math.round(h * dpr);
    var ctx = canvas.getContext("2d");
    ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
    ctx.imageSmoothingEnabled = false;
    return ctx;
  }

  /* Small multiples -------------------------------------------------------------------- */
  var thumbs = Array.prototype.slice.call(document.querySelectorAll(".thumb"));
  // Every width is read before any canvas is resized: a read after a write forces the browser
  // to lay the page out again, once per small map (hundreds of ms on a busy machine).
  function thumbWidths() {
    return thumbs.map(function (fig) { return Math.max(60, Math.floor(fig.clientWidth - 10)); });
  }
  function drawThumbs(widths) {
    widths = widths || thumbWidths();
    thumbs.forEach(function (fig, t) {
      var m = maps[fig.dataset.map];
      if (!m) return;
      var canvas = fig.querySelector("canvas");
      var w = widths[t];
      var ctx = sizeCanvas(canvas, w, w);
      ctx.drawImage(image(m), 0, 0, k, k, 0, 0, w, w);
      fig.dataset.ready = "1";
    });
  }

  /* The large map ---------------------------------------------------------------------- */
  var focus = $("focus-map"), canvas = $("focus-canvas"), rowBox = $("row-labels"), colBox = $("col-labels"),
      tip = $("map-tip"), dragBox = $("drag-box");
  var LABEL_FONT = 11, LABEL_STEP = 14;   // px: text size and the least distance between two labels
  var state = { map: thumbs.length ? thumbs[0].dataset.map : data.maps[0].key,
                r0: 0, c0: 0, n: k, pin: null, hover: null, found: -1, geom: null };

  var labelWidth = (function () {
    var ctx = document.createElement("canvas").getContext("2d");
    ctx.font = LABEL_FONT + "px system-ui, -apple-system, 'Segoe UI', Roboto, sans-serif";
    var w = 0;
    vars.forEach(function (v) { w = Math.max(w, ctx.measureText(v).width); });
    return Math.min(k <= 60 ? 160 : 130, Math.ceil(w) + 10);
  })();

  function geometry() {
    var wrap = focus.parentNode;
    var avail = wrap.clientWidth - labelWidth - 6;
    var tall = window.innerHeight - labelWidth - 70;
    var g = Math.floor(Math.max(240, Math.min(avail, Math.max(tall, 420))));
    return { L: labelWidth, G: g, s: g / state.n };
  }

  function pairOf(i, j) {  // the (x, y) of the cell at row i, column j of the shown map
    var m = maps[state.map];
    if (m.symmetric) return { x: vars[j], y: vars[i] };
    return { x: vars[i], y: vars[j] };
  }

  function layoutLabels(geo) {
    rowBox.textContent = ""; colBox.textContent = "";
    var step = Math.max(1, Math.ceil(LABEL_STEP / geo.s));
    var fragR = document.createDocumentFragment(), fragC = document.createDocumentFragment();
    for (var t = 0; t < state.n; t++) {
      var i = state.r0 + t;
      if (i >= k) break;
      if (t % step !== 0) continue;  // labels keep LABEL_STEP px apart; zoom or hover reaches the rest
      var centre = geo.L + (t + 0.5) * geo.s;
      var r = el("div", { "class": "map-label row" + (i === state.found ? " found" : ""), title: vars[i] }, vars[i]);
      r.style.top = (centre - LABEL_STEP / 2) + "px"; r.style.width = (geo.L - 6) + "px";
      fragR.appendChild(r);
      var c = el("div", { "class": "map-label col" + (state.c0 + t === state.found ? " found" : ""),
                          title: vars[state.c0 + t] }, vars[state.c0 + t]);
      c.style.left = (centre - LABEL_STEP / 2) + "px"; c.style.height = (geo.L - 6) + "px";
      fragC.appendChild(c);
    }
    rowBox.appendChild(fragR); colBox.appendChild(fragC);
    focus.dataset.labelStep = String(step);
  }

  function drawFocus() {
    var m = maps[state.map], geo = geometry();
    state.geom = geo;
    focus.style.width = (geo.L + geo.G + 2) + "px";
    focus.style.height = (geo.L + geo.G + 2) + "px";
    canvas.style.left = geo.L + "px"; canvas.style.top = geo.L + "px";
    var ctx = sizeCanvas(canvas, geo.G, geo.G);
    ctx.drawImage(image(m), state.c0, state.r0, state.n, state.n, 0, 0, geo.G, geo.G);
    var s = geo.s;
    if (s >= 6) {  // thin paper lines between cells where there is room for them
      ctx.strokeStyle = "rgba(255,255,255,0.85)"; ctx.lineWidth = 1;
      ctx.beginPath();
      for (var t = 1; t < state.n; t++) {
        var p = Math.round(t * s) + 0.5;
        ctx.moveTo(p, 0); ctx.lineTo(p, geo.G); ctx.moveTo(0, p); ctx.lineTo(geo.G, p);
      }
      ctx.stroke();
    }
    function box(i, j, colour, width) {
      var x = (j - state.c0) * s, y = (i - state.r0) * s;
      if (x < -s || y < -s || x > geo.G || y > geo.G) return;
      ctx.strokeStyle = colour; ctx.lineWidth = width;
      ctx.strokeRect(x + width / 2, y + width / 2, Math.max(s - width, 1), Math.max(s - width, 1));
    }
    if (state.found >= 0) {
      ctx.fillStyle = "rgba(31, 78, 96, 0.16)";
      var f = state.found;
      if (f >= state.r0 && f < state.r0 + state.n) ctx.fillRect(0, (f - state.r0) * s, geo.G, Math.max(s, 2));
      if (f >= state.c0 && f < state.c0 + state.n) ctx.fillRect((f - state.c0) * s, 0, Math.max(s, 2), geo.G);
    }
    if (state.hover) box(state.hover.i, state.hover.j, "#b4472b", 1.5);
    if (state.pin) box(state.pin.i, state.pin.j, "#1f2a30", 2.5);
    layoutLabels(geo);
    $("focus-title").textContent = m.label;
    var zoomed = state.n < k;
    $("focus-hint").textContent = (m.symmetric ? "" : "rows predict columns; ") +
      (zoomed ? "rows and columns " + fmtCount(state.r0 + 1) + "–" + fmtCount(Math.min(k, state.r0 + state.n)) +
        " of " + fmtCount(k) + " (press “all” to see every column)" : fmtCount(k) + " columns") +
      (focus.dataset.labelStep !== "1" ? "; every " + ordinal(Number(focus.dataset.labelStep)) + " name shown: zoom in or hover for the rest" : "");
    drawLegend(m);
    thumbs.forEach(function (fig) {
      var on = fig.dataset.map === state.map;
      fig.classList.toggle("active", on);
      fig.setAttribute("aria-selected", on ? "true" : "false");
    });
    focus.dataset.map = state.map;
    focus.dataset.ready = "1";
  }

  function drawLegend(m) {
    var bar = $("legend-bar"), ctx = bar.getContext("2d");
    for (var x = 0; x < bar.width; x++) {
      var t = Math.round(x / (bar.width - 1) * 255);
      ctx.fillStyle = "rgb(" + m.lut[t * 3] + "," + m.lut[t * 3 + 1] + "," + m.lut[t * 3 + 2] + ")";
      ctx.fillRect(x, 0, 1, bar.height);
    }
    $("legend-lo").textContent = fmtEst(m.lo);
    $("legend-hi").textContent = fmtEst(m.hi);
  }

  var scheduled = false;
  function redraw() {
    if (scheduled) return;
    scheduled = true;
    window.requestAnimationFrame(function () { scheduled = false; drawFocus(); });
  }

  function cellAt(ev) {
    var r = canvas.getBoundingClientRect(), s = state.geom.s;
    var j = state.c0 + Math.floor((ev.clientX - r.left) / s), i = state.r0 + Math.floor((ev.clientY - r.top) / s);
    if (i < 0 || j < 0 || i >= k || j >= k || i >= state.r0 + state.n || j >= state.c0 + state.n) return null;
    return { i: i, j: j };
  }

  function measureLines(i, j) {  // every measure of the pair at cell (i, j), each direction once
    var p = pairOf(i, j), xi = index[p.x], yi = index[p.y], out = [];
    data.maps.forEach(function (m) {
      if (!m.measure) return;
      if (m.symmetric) {
        out.push({ label: m.label, est: m.E[xi * k + yi], q: m.Q ? m.Q[xi * k + yi] : NaN, measure: m.measure });
      } else {
        out.push({ label: m.label + ", " + p.x + " → " + p.y, est: m.E[xi * k + yi], q: m.Q[xi * k + yi], measure: m.measure });
        out.push({ label: m.label + ", " + p.y + " → " + p.x, est: m.E[yi * k + xi], q: m.Q[yi * k + xi], measure: m.measure });
      }
    });
    return out;
  }

  function showTip(ev, c) {
    if (!c || c.i === c.j) { tip.hidden = true; return; }
    var p = pairOf(c.i, c.j), m = maps[state.map];
    tip.textContent = "";
    tip.appendChild(el("strong", null, m.symmetric ? p.x + " × " + p.y : p.x + " → " + p.y));
    if (!m.measure) {
      tip.appendChild(el("div", null, m.label + " " + fmtEst(m.E[c.i * k + c.j])));
    }
    measureLines(c.i, c.j).forEach(function (line) {
      tip.appendChild(el("div", null, line.label + " " + fmtEst(line.est) + "  q " + fmtP(line.q)));
    });
    tip.hidden = false;
    var pane = $("maps-pane").getBoundingClientRect();
    var x = ev.clientX - pane.left + 14, y = ev.clientY - pane.top + 14;
    if (x + tip.offsetWidth > pane.width) x = Math.max(0, x - tip.offsetWidth - 28);
    tip.style.left = x + "px"; tip.style.top = y + "px";
  }

  var drag = null;
  canvas.addEventListener("mousedown", function (ev) {
    if (ev.button !== 0) return;
    drag = { x: ev.clientX, y: ev.clientY, cell: cellAt(ev), moved: false };
    ev.preventDefault();
  });
  window.addEventListener("mousemove", function (ev) {
    if (drag) {
      var dx = ev.clientX - drag.x, dy = ev.clientY - drag.y;
      if (Math.abs(dx) + Math.abs(dy) > 6) {
        drag.moved = true;
        var r = focus.getBoundingClientRect();
        dragBox.hidden = false;
        dragBox.style.left = (Math.min(ev.clientX, drag.x) - r.left) + "px";
        dragBox.style.top = (Math.min(ev.clientY, drag.y) - r.top) + "px";
        dragBox.style.width = Math.abs(dx) + "px"; dragBox.style.height = Math.abs(dy) + "px";
      }
    }
  });
  window.addEventListener("mouseup", function (ev) {
    if (!drag) return;
    var d = drag;
    drag = null;
    dragBox.hidden = true;
    if (!d.moved) {
      if (d.cell && d.cell.i !== d.cell.j) pin(d.cell.i, d.cell.j);
      return;
    }
    var end = cellAt(ev) || { i: Math.min(k - 1, state.r0 + state.n - 1), j: Math.min(k - 1, state.c0 + state.n - 1) };
    var a = d.cell || { i: state.r0, j: state.c0 };
    var r0 = Math.min(a.i, end.i), c0 = Math.min(a.j, end.j);
    var n = Math.max(Math.abs(a.i - end.i), Math.abs(a.j - end.j)) + 1;
    setView(r0, c0, Math.max(2, n));
  });
  canvas.addEventListener("mousemove", function (ev) {
    if (drag && drag.moved) return;
    var c = cellAt(ev);
    var changed = !c || !state.hover || c.i !== state.hover.i || c.j !== state.hover.j;
    state.hover = c;
    showTip(ev, c);
    if (changed) redraw();
  });
  canvas.addEventListener("mouseleave", function () { state.hover = null; tip.hidden = true; redraw(); });
  canvas.addEventListener("dblclick", function () { setView(0, 0, k); });

  function setView(r0, c0, n) {
    n = Math.max(2, Math.min(k, Math.round(n)));
    state.n = n;
    state.r0 = Math.max(0, Math.min(k - n, Math.round(r0)));
    state.c0 = Math.max(0, Math.min(k - n, Math.round(c0)));
    redraw();
  }
  function zoom(factor) {
    var ci = state.pin ? state.pin.i : (state.found >= 0 ? state.found : state.r0 + state.n / 2);
    var cj = state.pin ? state.pin.j : (state.found >= 0 ? state.found : state.c0 + state.n / 2);
    var n = Math.max(2, Math.min(k, Math.round(state.n * factor)));
    setView(ci - n / 2, cj - n / 2, n);
  }
  $("zoom-in").addEventListener("click", function () { zoom(0.5); });
  $("zoom-out").addEventListener("click", function () { zoom(2); });
  $("zoom-fit").addEventListener("click", function () { setView(0, 0, k); });

  function ensureVisible(i, j) {
    var r0 = state.r0, c0 = state.c0;
    if (i < r0) r0 = i; else if (i >= r0 + state.n) r0 = i - state.n + 1;
    if (j < c0) c0 = j; else if (j >= c0 + state.n) c0 = j - state.n + 1;
    if (r0 !== state.r0 || c0 !== state.c0) setView(r0, c0, state.n);
  }

  focus.addEventListener("keydown", function (ev) {
    var moves = { ArrowUp: [-1, 0], ArrowDown: [1, 0], ArrowLeft: [0, -1], ArrowRight: [0, 1] };
    if (ev.key === "Enter" && state.pin) {
      var p = pairOf(state.pin.i, state.pin.j);
      window.location.assign(P.pairUrl(p.x, p.y));
      return;
    }
    var mv = moves[ev.key];
    if (!mv) return;
    ev.preventDefault();
    var c = state.pin || { i: 1, j: 0 };
    if (state.pin) {
      var i = c.i + mv[0], j = c.j + mv[1];
      if (i === j) { i += mv[0]; j += mv[1]; }  // step over the diagonal
      if (i < 0 || j < 0 || i >= k || j >= k) return;
      c = { i: i, j: j };
    }
    ensureVisible(c.i, c.j);
    pin(c.i, c.j);
  });

  thumbs.forEach(function (fig) {
    function choose() { state.map = fig.dataset.map; redraw(); }
    fig.addEventListener("click", choose);
    fig.addEventListener("keydown", function (ev) { if (ev.key === "Enter" || ev.key === " ") { ev.preventDefault(); choose(); } });
  });

  var search = $("column-search");
  function find() {
    var text = (search.value || "").trim().toLowerCase();
    if (!text) { state.found = -1; redraw(); return; }
    var hit = -1;
    vars.forEach(function (v, i) { if (hit < 0 && v.toLowerCase() === text) hit = i; });
    if (hit < 0) vars.forEach(function (v, i) { if (hit < 0 && v.toLowerCase().indexOf(text) >= 0) hit = i; });
    state.found = hit;
    if (hit >= 0) ensureVisible(hit, hit);
    search.setCustomValidity(hit < 0 ? "no column contains “" + search.value + "”" : "");
    redraw();
  }
  search.addEventListener("change", find);
  search.addEventListener("keydown", function (ev) { if (ev.key === "Enter") { ev.preventDefault(); find(); } });

  var form = $("view-form");
  ["order-select", "diff-select"].forEach(function (id) {
    var s = $(id);
    if (s) s.addEventListener("change", function () { form.submit(); });
  });

  /* A pair's points arrive as base64 typed arrays (no float printing or parsing) and are kept
     for the page's life, so a pair clicked again draws at once. */
  var previews = {}, previewKeys = [], PREVIEW_KEEP = 40;
  function unpack(b64, Type) {
    var bin = window.atob(b64), bytes = new Uint8Array(bin.length);
    for (var t = 0; t < bin.length; t++) bytes[t] = bin.charCodeAt(t);
    return new Type(bytes.buffer);
  }
  function previewOf(x, y) {
    var key = x + "\u0000" + y;
    if (previews[key]) return Promise.resolve(previews[key]);
    return fetch(api("/pair-preview", { x: x, y: y, points: "packed" }), { cache: "no-store" })
      .then(function (r) { if (!r.ok) throw new Error("HTTP " + r.status); return r.json(); })
      .then(function (d) {
        var pts = d.points;
        if (pts && pts.encoding === "base64-le") {
          d.points = { x: unpack(pts.x, Float32Array), y: unpack(pts.y, Float32Array), rows: unpack(pts.rows, Int32Array) };
        }
        previews[key] = d;
        previewKeys.push(key);
        if (previewKeys.length > PREVIEW_KEEP) delete previews[previewKeys.shift()];
        return d;
      });
  }

  /* The pinned pair: numbers at once, then the scatter, then the verdict ----------------- */
  var panel = { seq: 0 };
  function pin(i, j) {
    state.pin = { i: i, j: j };
    redraw();
    var p = pairOf(i, j), seq = ++panel.seq;
    var sc = $("pair-scatter");
    sc.dataset.ready = "0";
    sc.dataset.x = p.x; sc.dataset.y = p.y;
    $("panel-title").textContent = p.x + " and " + p.y;
    $("panel-hint").textContent = "x: " + p.x + " · y: " + p.y;
    var body = $("panel-measures").querySelector("tbody");
    body.textContent = "";
    measureLines(i, j).forEach(function (line) {
      var tr = el("tr", { "data-measure": line.measure });
      tr.appendChild(el("td", null, line.label));
      tr.appendChild(el("td", { "class": "num" }, fmtEst(line.est)));
      tr.appendChild(el("td", { "class": "num" + (line.q < alpha ? " significant" : "") }, fmtP(line.q)));
      body.appendChild(tr);
    });
    var open = $("panel-open");
    open.href = P.pairUrl(p.x, p.y);
    open.hidden = false;
    $("panel-verdict").textContent = "Verdict: being worked out…";
    previewOf(p.x, p.y)
      .then(function (d) {
        if (seq !== panel.seq) return;
        drawScatter(d);
        sc.dataset.n = String(d.points.x.length);
        sc.dataset.ready = "1";
        if (d.complete && d.pattern) showVerdict(d.pattern);
        else return fetch(api("/pair", { x: p.x, y: p.y }), { cache: "no-store" })
          .then(function (r) { if (!r.ok) throw new Error("HTTP " + r.status); return r.json(); })
          .then(function (full) {
            d.pattern = full.pattern; d.complete = true;  // the kept preview answers a second click whole
            if (seq === panel.seq) showVerdict(full.pattern);
          });
      })
      .catch(function (e) {
        if (seq !== panel.seq) return;
        $("panel-verdict").textContent = "Could not load this pair (" + e.message + ").";
        sc.dataset.ready = "error";
      });
  }
  function showVerdict(pattern) {
    var v = $("panel-verdict");
    v.textContent = "";
    if (!pattern) { v.textContent = "Verdict: –"; return; }
    v.appendChild(el("strong", null, "Verdict: " + pattern.label));
    if (pattern.reasons && pattern.reasons.length) v.appendChild(el("span", { "class": "hint" }, " " + pattern.reasons[0]));
  }

  function niceTicks(lo, hi, count) {
    var span = hi - lo;
    if (!(span > 0)) return [lo];
    var step = Math.pow(10, Math.floor(Math.log10(span / count)));
    [1, 2, 5, 10].some(function (m) { if (span / (step * m) <= count) { step *= m; return true; } return false; });
    var out = [];
    for (var t = Math.ceil(lo / step) * step; t <= hi + step * 1e-9; t += step) out.push(Math.abs(t) < step * 1e-9 ? 0 : t);
    return out;
  }
  function tickText(v) {
    var a = Math.abs(v);
    if (a !== 0 && (a < 1e-3 || a >= 1e5)) return v.toExponential(1);
    return String(Math.round(v * 1e6) / 1e6);
  }

  function drawScatter(d) {
    var box = $("pair-scatter"), c = $("scatter-canvas");
    var W = Math.max(260, box.clientWidth), H = Math.round(W * 0.8);
    var ctx = sizeCanvas(c, W, H);
    ctx.imageSmoothingEnabled = true;
    var xs = d.points.x, ys = d.points.y, n = xs.length;
    var pad = { l: 58, r: 12, t: 10, b: 44 }, w = W - pad.l - pad.r, h = H - pad.t - pad.b;
    var xlo = Infinity, xhi = -Infinity, ylo = Infinity, yhi = -Infinity, t;
    for (t = 0; t < n; t++) {
      if (xs[t] < xlo) xlo = xs[t]; if (xs[t] > xhi) xhi = xs[t];
      if (ys[t] < ylo) ylo = ys[t]; if (ys[t] > yhi) yhi = ys[t];
    }
    if (!n) { xlo = ylo = 0; xhi = yhi = 1; }
    if (xhi === xlo) { xlo -= 1; xhi += 1; }
    if (yhi === ylo) { ylo -= 1; yhi += 1; }
    var mx = (xhi - xlo) * 0.04, my = (yhi - ylo) * 0.04;
    xlo -= mx; xhi += mx; ylo -= my; yhi += my;
    function X(v) { return pad.l + (v - xlo) / (xhi - xlo) * w; }
    function Y(v) { return pad.t + h - (v - ylo) / (yhi - ylo) * h; }
    ctx.clearRect(0, 0, W, H);
    ctx.fillStyle = "#fbfcfc"; ctx.fillRect(pad.l, pad.t, w, h);
    ctx.font = "11px system-ui, -apple-system, 'Segoe UI', Roboto, sans-serif";
    ctx.fillStyle = "#55636b"; ctx.strokeStyle = "#e3e0d8"; ctx.lineWidth = 1;
    ctx.textAlign = "center"; ctx.textBaseline = "top";
    niceTicks(xlo, xhi, 6).forEach(function (v) {
      var px = Math.round(X(v)) + 0.5;
      ctx.beginPath(); ctx.moveTo(px, pad.t); ctx.lineTo(px, pad.t + h); ctx.stroke();
      ctx.fillText(tickText(v), px, pad.t + h + 4);
    });
    ctx.textAlign = "right"; ctx.textBaseline = "middle";
    niceTicks(ylo, yhi, 6).forEach(function (v) {
      var py = Math.round(Y(v)) + 0.5;
      ctx.beginPath(); ctx.moveTo(pad.l, py); ctx.lineTo(pad.l + w, py); ctx.stroke();
      ctx.fillText(tickText(v), pad.l - 5, py);
    });
    ctx.save();
    ctx.beginPath(); ctx.rect(pad.l, pad.t, w, h); ctx.clip();
    var r = n > 3000 ? 1.2 : n > 500 ? 1.8 : 2.6;
    ctx.fillStyle = n > 3000 ? "rgba(31, 78, 96, 0.28)" : "rgba(31, 78, 96, 0.55)";
    for (t = 0; t < n; t++) ctx.fillRect(X(xs[t]) - r, Y(ys[t]) - r, 2 * r, 2 * r);
    var g = d.gaussian || {}, ell = g.ellipses || {};
    ctx.strokeStyle = "#b4472b"; ctx.lineWidth = 1.4;
    Object.keys(ell).forEach(function (mass, e) {
      var pts = ell[mass];
      ctx.setLineDash(e === 0 ? [] : [5, 4]);
      ctx.beginPath();
      pts.forEach(function (q, u) { if (u === 0) ctx.moveTo(X(q[0]), Y(q[1])); else ctx.lineTo(X(q[0]), Y(q[1])); });
      ctx.stroke();
    });
    ctx.setLineDash([]);
    var cond = g.conditional || {};
    if (cond.slope !== null && cond.slope !== undefined && cond.intercept !== null) {
      ctx.lineWidth = 2.2; ctx.strokeStyle = "#1f2a30";
      ctx.beginPath();
      ctx.moveTo(X(xlo), Y(cond.intercept + cond.slope * xlo));
      ctx.lineTo(X(xhi), Y(cond.intercept + cond.slope * xhi));
      ctx.stroke();
    }
    ctx.restore();
    ctx.fillStyle = "#1f2a30"; ctx.font = "12px system-ui, -apple-system, 'Segoe UI', Roboto, sans-serif";
    ctx.textAlign = "center"; ctx.textBaseline = "bottom";
    ctx.fillText(d.x, pad.l + w / 2, H - 2);
    ctx.save(); ctx.translate(12, pad.t + h / 2); ctx.rotate(-Math.PI / 2);
    ctx.textBaseline = "middle"; ctx.fillText(d.y, 0, 0); ctx.restore();
    var masses = Object.keys(ell).map(function (m) { return Math.round(parseFloat(m) * 100) + "%"; });
    $("scatter-key").textContent = n + " rows with both values · terracotta: Gaussian ellipses holding " +
      masses.join(", ") + " of the fitted law · dark line: its conditional mean E[y | x]";
  }

  document.querySelectorAll("a.pin-pair").forEach(function (a) {
    a.addEventListener("click", function (ev) {
      var i = index[a.dataset.y], j = index[a.dataset.x];
      if (i === undefined || j === undefined || ev.ctrlKey || ev.metaKey) return;
      ev.preventDefault();
      var m = maps[state.map];
      if (!m.symmetric) { var tmp = i; i = j; j = tmp; }
      ensureVisible(i, j);
      pin(i, j);
      $("workbench").scrollIntoView({ block: "start" });
    });
  });

  window.pairlensMaps = {  // for tests and the curious: where a cell is drawn, and the state
    cellCentre: function (i, j) {
      var r = canvas.getBoundingClientRect(), s = state.geom.s;
      return [r.left + (j - state.c0 + 0.5) * s, r.top + (i - state.r0 + 0.5) * s];
    },
    variables: vars, state: state, pin: pin, setView: setView, show: function (key) { state.map = key; drawFocus(); }
  };

  var firstWidths = thumbWidths();  // with the large map's geometry: one layout for both
  drawFocus();
  drawThumbs(firstWidths);  // a few ms: waiting a frame for them cost more on a busy machine than drawing them
  var resizeTimer = null;
  window.addEventListener("resize", function () {
    window.clearTimeout(resizeTimer);
    resizeTimer = window.setTimeout(function () { drawThumbs(); drawFocus(); }, 120);
  });

  /* The pair table: sorted, filtered and paged by the server ---------------------------- */
  (function initPairTable() {
    var cols = readJSON("pair-columns");
    var head = $("pair-head"), tbody = $("pair-body");
    if (!cols || !head) return;
    var PAGE = 100, offset = 0, sort = "evidence", desc = false, total = 0;
    var fText = $("filter-text"), fMeasure = $("filter-measure"), fQ = $("filter-q"), fVerdict = $("filter-verdict"),
        prev = $("pair-prev"), next = $("pair-more"), count = $("pair-count");
    var headers = [{ label: "x", key: "x" }, { label: "y", key: "y" }, { label: "n", key: "n", num: true }];
    cols.forEach(function (c, t) {
      var dir = c.direction ? ", " + c.direction : "";
      headers.push({ label: c.label + dir, key: "est:" + t, num: true, title: c.label + dir + ": estimate (sorts by size)" });
      headers.push({ label: "q", key: "q:" + t, num: true, title: "q-value of " + c.label + dir });
    });
    headers.push({ label: "verdict", key: "verdict" });
    headers.forEach(function (h) {
      var th = el("th", { scope: "col", tabindex: "0", "data-key": h.key }, h.label);
      if (h.title) th.setAttribute("title", h.title);
      if (h.num) th.className = "num";
      function go() {
        if (sort === h.key) desc = !desc;
        else { sort = h.key; desc = h.key.indexOf("est:") === 0 || h.key === "n"; }
        head.querySelectorAll("th").forEach(function (t) { t.removeAttribute("aria-sort"); });
        th.setAttribute("aria-sort", desc ? "descending" : "ascending");
        offset = 0; load();
      }
      th.addEventListener("click", go);
      th.addEventListener("keydown", function (e) { if (e.key === "Enter") go(); });
      head.appendChild(th);
    });
    function params() {
      var p = { sort: sort, desc: desc ? "true" : "false" };
      if (fText.value) p.text = fText.value;
      if (fMeasure.value !== "" && fQ.value !== "") { p.column = fMeasure.value; p.q = fQ.value; }
      if (fVerdict.value) p.verdict = fVerdict.value;
      return p;
    }
    var loaded = false, seq = 0;
    function load() {
      var p = params(), my = ++seq;
      ["csv", "json"].forEach(function (f) {
        $("download-" + f).href = api("/pair-table", Object.assign({ download: f }, p));
      });
      p.offset = String(offset); p.limit = String(PAGE);
      fetch(api("/pair-table", p), { cache: "no-store" }).then(function (r) { return r.json(); }).then(function (d) {
        if (my !== seq) return;
        if (!loaded) {
          d.verdicts.forEach(function (v) { fVerdict.appendChild(el("option", { value: v }, v)); });
          loaded = true;
        }
        total = d.filtered;
        tbody.textContent = "";
        var frag = document.createDocumentFragment();
        d.rows.forEach(function (r) {
          var tr = el("tr", { tabindex: "0", "class": "pair-row" });
          tr.dataset.x = r[0]; tr.dataset.y = r[1];
          tr.appendChild(el("td", { "class": "name", title: r[0] }, r[0]));
          tr.appendChild(el("td", { "class": "name", title: r[1] }, r[1]));
          tr.appendChild(el("td", { "class": "num" }, P.fmtCount(r[2])));
          cols.forEach(function (c, t) {
            tr.appendChild(el("td", { "class": "num" }, fmtEst(r[3][t])));
            var q = r[4][t];
            tr.appendChild(el("td", { "class": "num" + (q !== null && q < alpha ? " significant" : "") }, fmtP(q)));
          });
          tr.appendChild(el("td", { "class": "verdict" }, r[5] || "–"));
          function open() { window.location.assign(P.pairUrl(r[0], r[1])); }
          tr.addEventListener("click", open);
          tr.addEventListener("keydown", function (e) { if (e.key === "Enter") open(); });
          frag.appendChild(tr);
        });
        tbody.appendChild(frag);
        var last = Math.min(offset + PAGE, total);
        count.textContent = "rows " + fmtCount(total ? offset + 1 : 0) + "–" + fmtCount(last) + " of " + fmtCount(total) +
          " pairs shown by the filters (" + fmtCount(d.total) + " in all)";
        prev.disabled = offset === 0;
        next.disabled = last >= total;
        $("pair-table").dataset.ready = "1";
      });
    }
    prev.addEventListener("click", function () { offset = Math.max(0, offset - PAGE); load(); });
    next.addEventListener("click", function () { offset += PAGE; load(); });
    var timer = null;
    [fText, fMeasure, fQ, fVerdict].forEach(function (f) {
      f.addEventListener("input", function () { window.clearTimeout(timer); timer = window.setTimeout(function () { offset = 0; load(); }, 150); });
    });
    load();
  })();
})();
