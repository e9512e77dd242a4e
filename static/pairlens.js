/* pairlens dashboard behaviour. Plain JS, no framework. Text reaches the DOM only through
   textContent / setAttribute, never innerHTML, so column names render as typed. */
(function () {
  "use strict";

  function readJSON(id) {
    var el = document.getElementById(id);
    if (!el) return null;
    return JSON.parse(el.textContent);
  }

  function $(id) { return document.getElementById(id); }

  function el(tag, attrs, text) {
    var node = document.createElement(tag);
    if (attrs) Object.keys(attrs).forEach(function (k) { node.setAttribute(k, attrs[k]); });
    if (text !== undefined && text !== null) node.textContent = text;
    return node;
  }

  function fmt(v, digits) {
    if (v === null || v === undefined || !isFinite(v)) return "–";
    digits = digits || 3;
    var a = Math.abs(v);
    if (a !== 0 && (a < 1e-3 || a >= 1e5)) return v.toExponential(digits - 1);
    return a >= 1 ? v.toPrecision(digits + 1) : v.toFixed(digits);
  }

  function fmtP(v) {
    if (v === null || v === undefined || !isFinite(v)) return "–";
    if (v === 0) return "< 1e-300";
    return v < 1e-4 ? v.toExponential(1) : v.toFixed(4);
  }

  function seconds(s) {
    if (s === null || s === undefined || !isFinite(s)) return "estimating time left…";
    if (s < 1) return "under a second left";
    if (s < 90) return Math.round(s) + " s left";
    return Math.round(s / 60) + " min left";
  }

  var PLOT_CONFIG = { responsive: true, displaylogo: false,
    modeBarButtonsToRemove: ["select2d", "lasso2d", "autoScale2d", "toggleSpikelines"] };

  var analysisId = (function () {
    var m = window.location.pathname.match(/^\/analyses\/([^/]+)/);
    return m ? decodeURIComponent(m[1]) : null;
  })();

  function pairUrl(x, y) {
    var q = new URLSearchParams({ x: x, y: y });
    return "/analyses/" + encodeURIComponent(analysisId) + "/pair?" + q.toString();
  }

  function openPair(x, y) { window.location.assign(pairUrl(x, y)); }

  window.pairlens = { openPair: openPair, pairUrl: pairUrl };

  /* Home: drag and drop onto the file input ------------------------------------------ */
  function initUpload() {
    var zone = $("dropzone"), input = $("upload-input"), label = $("drop-file");
    if (!zone || !input) return;
    function show() { label.textContent = input.files && input.files.length ? input.files[0].name : ""; }
    input.addEventListener("change", show);
    ["dragenter", "dragover"].forEach(function (ev) {
      zone.addEventListener(ev, function (e) { e.preventDefault(); zone.classList.add("over"); });
    });
    ["dragleave", "drop"].forEach(function (ev) {
      zone.addEventListener(ev, function (e) { e.preventDefault(); zone.classList.remove("over"); });
    });
    zone.addEventListener("drop", function (e) {
      if (e.dataTransfer && e.dataTransfer.files && e.dataTransfer.files.length) {
        input.files = e.dataTransfer.files;
        show();
      }
    });
  }

  function initColumnToggle() {
    var all = $("all-columns");
    if (!all) return;
    all.addEventListener("change", function () {
      document.querySelectorAll(".column-box").forEach(function (b) { b.checked = all.checked; });
    });
  }

  /* Running analysis: poll the status ----------------------------------------------- */
  function initProgress() {
    var bar = $("progress");
    if (!bar || !analysisId) return;
    var fill = $("progress-fill"), pct = $("progress-percent"), left = $("progress-left"),
        status = $("progress-status"), phase = $("progress-phase");
    var cancelForm = $("cancel-form");
    if (cancelForm) cancelForm.addEventListener("submit", function (e) {
      e.preventDefault();
      $("cancel-analysis").disabled = true;
      $("cancel-analysis").textContent = "Cancelling…";
      fetch("/api/analyses/" + encodeURIComponent(analysisId) + "/cancel",
            { method: "POST", referrerPolicy: "same-origin", credentials: "same-origin" })
        .then(function () { poll(); });
    });
    function poll() {
      fetch("/api/analyses/" + encodeURIComponent(analysisId), { cache: "no-store" })
        .then(function (r) { return r.json(); })
        .then(function (s) {
          var p = Math.round((s.progress || 0) * 1000) / 10;
          fill.style.width = p + "%";
          bar.setAttribute("aria-valuenow", String(Math.round(p)));
          bar.dataset.status = s.status;
          pct.textContent = Math.round(p) + "%";
          status.textContent = s.status + (s.cancel_requested && s.status === "running" ? " (cancelling)" : "");
          phase.textContent = s.phase || "";
          left.textContent = s.status === "queued" ? "waiting to start" : seconds(s.seconds_left);
          if (s.status === "queued" || s.status === "running") {
            window.setTimeout(poll, 500);
          } else {
            window.location.reload();
          }
        })
        .catch(function () { window.setTimeout(poll, 1500); });
    }
    poll();
  }

  /* Analysis page: heatmaps side by side --------------------------------------------- */
  function attachClick(div, fig, measure) {
    var vars = fig.layout.meta.variables;
    var symmetric = !(fig.layout.yaxis.title && fig.layout.yaxis.title.text === "from (row)");
    var labelIndex = {};
    fig.data[0].x.forEach(function (lab, i) { labelIndex[lab] = i; });
    function cell(row, col) {
      if (row === col) return null;
      return symmetric ? { x: vars[col], y: vars[row] } : { x: vars[row], y: vars[col] };
    }
    div.pairlensCell = cell;
    div.on("plotly_click", function (ev) {
      if (!ev || !ev.points || !ev.points.length) return;
      var p = ev.points[0], row, col;
      if (p.curveNumber === 0 && Array.isArray(p.pointNumber)) {
        row = p.pointNumber[0]; col = p.pointNumber[1];
      } else {
        row = labelIndex[p.y]; col = labelIndex[p.x];
      }
      var c = cell(row, col);
      if (c) openPair(c.x, c.y);
    });
  }

  function initHeatmaps() {
    var data = readJSON("heatmap-data");
    if (!data || !window.Plotly) return;
    Object.keys(data.figures).forEach(function (m, k) {
      var div = $("heatmap-" + m);
      if (!div) return;
      var fig = data.figures[m];
      // All heatmaps share one order: row names only on the first, hover still names both.
      if (k > 0 && window.matchMedia("(min-width: 1100px)").matches) fig.layout.yaxis.showticklabels = false;
      Plotly.newPlot(div, fig.data, fig.layout, PLOT_CONFIG).then(function () {
        attachClick(div, fig, m);
        div.dataset.ready = "1";
      });
    });
    if (data.difference && $("heatmap-difference")) {
      var d = $("heatmap-difference");
      Plotly.newPlot(d, data.difference.data, data.difference.layout, PLOT_CONFIG).then(function () {
        attachClick(d, data.difference, "difference");
        d.dataset.ready = "1";
      });
    }
    var form = $("view-form");
    ["order-select", "diff-select"].forEach(function (id) {
      var s = $(id);
      if (s) s.addEventListener("change", function () { form.submit(); });
    });
  }

  /* Analysis page: the pair table (sort, filter, page) ------------------------------- */
  function initPairTable() {
    var data = readJSON("pair-data");
    var head = $("pair-head"), body = $("pair-body");
    if (!data || !head || !body) return;
    var cols = data.columns, rows = data.rows, alpha = data.alpha;
    var PAGE = 100, shown = PAGE;
    var sortKey = { kind: "none", index: -1, dir: 1 };
    var fText = $("filter-text"), fMeasure = $("filter-measure"), fQ = $("filter-q"), fVerdict = $("filter-verdict"),
        more = $("pair-more"), count = $("pair-count");

    var verdicts = {};
    rows.forEach(function (r) { if (r[5]) verdicts[r[5]] = true; });
    Object.keys(verdicts).sort().forEach(function (v) { fVerdict.appendChild(el("option", { value: v }, v)); });

    var headers = [{ label: "x", kind: "x" }, { label: "y", kind: "y" }, { label: "n", kind: "n" }];
    cols.forEach(function (c, k) {
      var dir = c.direction ? " " + c.direction : "";
      headers.push({ label: c.label + dir, kind: "est", index: k });
      headers.push({ label: "q", kind: "q", index: k, title: "q-value of " + c.label + dir });
    });
    headers.push({ label: "verdict", kind: "verdict" });
    headers.forEach(function (h) {
      var th = el("th", { scope: "col", tabindex: "0", "data-kind": h.kind }, h.label);
      if (h.title) th.setAttribute("title", h.title);
      if (h.kind === "est" || h.kind === "q" || h.kind === "n") th.className = "num";
      th.addEventListener("click", function () { sortBy(h, th); });
      th.addEventListener("keydown", function (e) { if (e.key === "Enter") sortBy(h, th); });
      head.appendChild(th);
    });

    function value(r, h) {
      switch (h.kind) {
        case "x": return r[0];
        case "y": return r[1];
        case "n": return r[2];
        case "est": return r[3][h.index];
        case "q": return r[4][h.index];
        case "verdict": return r[5] || "";
      }
      return null;
    }

    function sortBy(h, th) {
      if (sortKey.h === h) sortKey.dir = -sortKey.dir;
      else { sortKey.h = h; sortKey.dir = (h.kind === "est") ? -1 : 1; }
      head.querySelectorAll("th").forEach(function (t) { t.removeAttribute("aria-sort"); });
      th.setAttribute("aria-sort", sortKey.dir > 0 ? "ascending" : "descending");
      shown = PAGE;
      render();
    }

    function filtered() {
      var text = (fText.value || "").toLowerCase();
      var mi = fMeasure.value === "" ? -1 : parseInt(fMeasure.value, 10);
      var qmax = parseFloat(fQ.value);
      var verdict = fVerdict.value;
      var out = rows.filter(function (r) {
        if (text && r[0].toLowerCase().indexOf(text) < 0 && r[1].toLowerCase().indexOf(text) < 0) return false;
        if (mi >= 0 && isFinite(qmax)) { var q = r[4][mi]; if (q === null || !(q < qmax)) return false; }
        if (verdict && r[5] !== verdict) return false;
        return true;
      });
      if (sortKey.h) {
        var h = sortKey.h, dir = sortKey.dir;
        var useAbs = h.kind === "est";
        out.sort(function (a, b) {
          var va = value(a, h), vb = value(b, h);
          if (va === null || va === undefined) return 1;
          if (vb === null || vb === undefined) return -1;
          if (typeof va === "string") return dir * va.localeCompare(vb);
          if (useAbs) { va = Math.abs(va); vb = Math.abs(vb); }
          return dir * (va - vb);
        });
      }
      return out;
    }

    function render() {
      var list = filtered();
      body.textContent = "";
      var frag = document.createDocumentFragment();
      list.slice(0, shown).forEach(function (r) {
        var tr = el("tr", { tabindex: "0", "class": "pair-row" });
        tr.dataset.x = r[0]; tr.dataset.y = r[1];
        tr.appendChild(el("td", { "class": "name" }, r[0]));
        tr.appendChild(el("td", { "class": "name" }, r[1]));
        tr.appendChild(el("td", { "class": "num" }, String(r[2])));
        cols.forEach(function (c, k) {
          tr.appendChild(el("td", { "class": "num" }, fmt(r[3][k])));
          var q = r[4][k];
          tr.appendChild(el("td", { "class": "num" + (q !== null && q < alpha ? " significant" : "") }, fmtP(q)));
        });
        tr.appendChild(el("td", { "class": "verdict" }, r[5] || "–"));
        tr.addEventListener("click", function () { openPair(r[0], r[1]); });
        tr.addEventListener("keydown", function (e) { if (e.key === "Enter") openPair(r[0], r[1]); });
        frag.appendChild(tr);
      });
      body.appendChild(frag);
      count.textContent = "showing " + Math.min(shown, list.length) + " of " + list.length + " pairs (" + rows.length + " in all)";
      more.hidden = list.length <= shown;
    }
    more.addEventListener("click", function () { shown += PAGE; render(); });
    [fText, fMeasure, fQ, fVerdict].forEach(function (f) {
      f.addEventListener("input", function () { shown = PAGE; render(); });
      f.addEventListener("change", function () { shown = PAGE; render(); });
    });
    render();
  }

  /* Pair view ------------------------------------------------------------------------ */
  function initPair() {
    var figs = readJSON("pair-figures");
    if (!figs || !window.Plotly) return;
    var scatter = $("pair-scatter");
    Plotly.newPlot(scatter, figs.scatter.data, figs.scatter.layout, PLOT_CONFIG).then(function () {
      scatter.dataset.ready = "1";
    });
    Plotly.newPlot($("pair-ranks"), figs.ranks.data, figs.ranks.layout, PLOT_CONFIG);
    var toggle = $("toggle-points");
    if (toggle) toggle.addEventListener("click", function () {
      var on = toggle.getAttribute("aria-pressed") !== "true";
      toggle.setAttribute("aria-pressed", on ? "true" : "false");
      toggle.textContent = on ? "Show the density" : "Show the points";
      Plotly.restyle(scatter, { visible: on ? true : "legendonly" }, [0]);
      Plotly.restyle(scatter, { visible: on ? "legendonly" : true }, [1]);
    });
    initSlice();
    var verdict = $("verdict");
    if (verdict && verdict.dataset.complete === "no") fillDetail();
  }

  function fillDetail() {
    var q = new URLSearchParams(window.location.search);
    var url = "/api/analyses/" + encodeURIComponent(analysisId) + "/pair?" +
      new URLSearchParams({ x: q.get("x"), y: q.get("y") }).toString();
    fetch(url, { cache: "no-store" }).then(function (r) {
      if (!r.ok) throw new Error("HTTP " + r.status);
      return r.json();
    }).then(function (d) {
      var pat = d.pattern || { label: "–", reasons: [] };
      $("verdict-label").textContent = pat.label;
      var ul = $("verdict-reasons");
      ul.textContent = "";
      pat.reasons.forEach(function (r) { ul.appendChild(el("li", null, r)); });
      var g = d.gaussian, nm = g.normality || {};
      var norm = $("normality");
      norm.textContent = "Henze-Zirkler statistic " + fmt(nm.statistic) + ", p = " + fmtP(nm.p_value) + " ";
      if (nm.p_value !== null && nm.p_value !== undefined) {
        norm.appendChild(el("span", { "class": nm.p_value < 0.05 ? "tag warn" : "tag" },
          nm.p_value < 0.05 ? "not jointly normal" : "no evidence against"));
      }
      var mg = g.marginal_normality || {};
      ["x", "y"].forEach(function (k) {
        var t = mg[k];
        $("marginal-" + k).textContent = t ? t.test + " p = " + fmtP(t.p_value) : "–";
      });
      $("gaussian-note").textContent = g.note || "–";
      var normalMarginals = mg.x && mg.y && mg.x.p_value > 0.05 && mg.y.p_value > 0.05;
      if (normalMarginals && nm.p_value !== null && nm.p_value < 0.05) {
        $("not-joint-p").textContent = fmtP(nm.p_value);
        $("weak-rho-note").hidden = !(g.rho !== null && Math.abs(g.rho) < 0.2);
        $("not-joint-normal").hidden = false;
      }
      $("verdict").dataset.complete = "yes";
    }).catch(function (e) {
      $("verdict-label").textContent = "not available (" + e.message + ")";
      $("verdict").dataset.complete = "error";
    });
  }

  function normalPdf(v, m, s) {
    var z = (v - m) / s;
    return Math.exp(-0.5 * z * z) / (s * Math.sqrt(2 * Math.PI));
  }

  function extent(a) {
    var lo = Infinity, hi = -Infinity;
    for (var i = 0; i < a.length; i++) { if (a[i] < lo) lo = a[i]; if (a[i] > hi) hi = a[i]; }
    return [lo, hi];
  }

  function initSlice() {
    var d = readJSON("slice-data"), range = $("slice-range"), out = $("slice-x0"), div = $("pair-slice"),
        summary = $("slice-summary");
    if (!d || !range || !div || !d.x.length) return;
    var xs = d.x, ys = d.y, n = xs.length;
    var xr = extent(xs), lo = xr[0], hi = xr[1];
    var sx = Math.sqrt(d.cov[0][0] || 0) || (hi - lo) / 4 || 1;
    var width = 0.5 * sx;
    var c = d.conditional;
    var yr = extent(ys), ylo = yr[0], yhi = yr[1];
    function update() {
      var x0 = lo + (hi - lo) * (parseInt(range.value, 10) / 1000);
      out.textContent = fmt(x0, 4);
      var near = [], xin = [];
      for (var i = 0; i < n; i++) {
        if (Math.abs(xs[i] - x0) <= width / 2) { near.push(ys[i]); xin.push(xs[i]); }
      }
      var traces = [{ type: "histogram", x: near, histnorm: "probability density", name: "actual y in the slice",
        marker: { color: "rgba(31, 78, 96, 0.55)" }, xbins: { start: ylo, end: yhi, size: (yhi - ylo) / 30 || 1 } }];
      var mean = null, sd = null;
      if (c && c.slope !== null && c.intercept !== null && c.residual_sd !== null) {
        // Law of total variance over the observed x values in the slice.
        var mx = x0, vx = 0;
        if (xin.length) {
          mx = xin.reduce(function (a, b) { return a + b; }, 0) / xin.length;
          vx = xin.reduce(function (a, b) { return a + (b - mx) * (b - mx); }, 0) / xin.length;
        }
        mean = c.intercept + c.slope * mx;
        sd = Math.sqrt(c.residual_sd * c.residual_sd + c.slope * c.slope * vx);
        if (sd > 0) {
          var grid = [], dens = [];
          for (var k = 0; k <= 120; k++) {
            var v = ylo + (yhi - ylo) * k / 120;
            grid.push(v); dens.push(normalPdf(v, mean, sd));
          }
          traces.push({ type: "scatter", mode: "lines", x: grid, y: dens, name: "Gaussian law of y in the slice",
            line: { color: "#b4472b", width: 2 } });
        }
      }
      var obsMean = near.length ? near.reduce(function (a, b) { return a + b; }, 0) / near.length : null;
      summary.textContent = near.length + " rows with |x − x₀| ≤ " + fmt(width / 2, 3) +
        "; their mean y " + fmt(obsMean, 4) + ", the Gaussian expects " + fmt(mean, 4) + " (sd " + fmt(sd, 3) + ")";
      Plotly.react(div, traces, {
        margin: { l: 45, r: 10, t: 10, b: 40 }, bargap: 0.03, showlegend: true,
        legend: { orientation: "h", y: -0.25, font: { size: 10 } },
        xaxis: { title: { text: d.yLabel.replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;") }, range: [ylo, yhi] },
        yaxis: { title: { text: "density" } },
        paper_bgcolor: "rgba(0,0,0,0)", plot_bgcolor: "#fbfcfc",
        font: { family: "system-ui, -apple-system, 'Segoe UI', Roboto, sans-serif", size: 11, color: "#1f2a30" }
      }, PLOT_CONFIG);
    }
    range.addEventListener("input", update);
    update();
  }

  document.addEventListener("DOMContentLoaded", function () {
    initUpload();
    initColumnToggle();
    initProgress();
    initHeatmaps();
    initPairTable();
    initPair();
  });
})();
