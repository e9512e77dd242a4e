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

  /* The one number rule of app/formatting.py (written on the methods page): three decimals
     between 0.001 and 100,000 in size, else two significant digits as a×10ⁿ. */
  var SUP = { "-": "⁻", "0": "⁰", "1": "¹", "2": "²", "3": "³", "4": "⁴", "5": "⁵", "6": "⁶", "7": "⁷", "8": "⁸", "9": "⁹" };
  function fmt(v) {
    if (v === null || v === undefined || !isFinite(v)) return "–";
    var a = Math.abs(v);
    if (a === 0 || (a >= 1e-3 && a < 1e5)) {
      var text = v.toFixed(3);
      return text === "-0.000" ? "0.000" : text;
    }
    var parts = v.toExponential(1).split("e");
    return parts[0] + "×10" + String(parseInt(parts[1], 10)).split("").map(function (c) { return SUP[c]; }).join("");
  }

  function fmtEst(v) {  // an estimate of a measure: three decimals whatever its size
    if (v === null || v === undefined || !isFinite(v)) return "–";
    if (Math.abs(v) >= 1e5) return fmt(v);
    var text = v.toFixed(3);
    return text === "-0.000" ? "0.000" : text;
  }

  function fmtP(v) {
    if (v === null || v === undefined || !isFinite(v)) return "–";
    if (v === 0) return "< 10⁻³⁰⁰";
    return fmt(v);
  }

  function fmtCount(v) {
    if (v === null || v === undefined || !isFinite(v)) return "–";
    return String(Math.round(v)).replace(/\B(?=(\d{3})+(?!\d))/g, "\u2009");
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

  window.pairlens = { openPair: openPair, pairUrl: pairUrl, fmt: fmt, fmtEst: fmtEst, fmtP: fmtP, fmtCount: fmtCount };

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
        status = $("progress-status"), phase = $("progress-phase"), phaseWrap = $("progress-phase-wrap");
    var cancelForm = $("cancel-form");
    if (cancelForm) cancelForm.addEventListener("submit", function (e) {
      e.preventDefault();
      $("cancel-analysis").disabled = true;
      $("cancel-analysis").textContent = "Cancelling…";
      fetch("/api/analyses/" + encodeURIComponent(analysisId) + "/cancel",
            { method: "POST", referrerPolicy: "same-origin", credentials: "same-origin" });
      // The polling chain below notices the new status; a second chain would reload twice.
    });
    var leaving = false;
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
          phaseWrap.hidden = !s.phase;
          left.textContent = s.status === "queued" ? "waiting to start" : seconds(s.seconds_left);
          if (s.status === "queued" || s.status === "running") {
            // Once every pair is computed only the q-values, figures and saving are left (a tenth of a
            // second for the demo): the poll interval is what the user waits for between "done" and the
            // maps, so it shortens as soon as the end is near (the last pairs can land just after a poll).
            var nearEnd = s.progress >= 0.99 || (typeof s.seconds_left === "number" && s.seconds_left < 1.5);
            window.setTimeout(poll, nearEnd ? 80 : 500);
          } else if (!leaving) {
            leaving = true;
            window.location.reload();
          }
        })
        .catch(function () { window.setTimeout(poll, 1500); });
    }
    poll();
  }

  /* Pair view ------------------------------------------------------------------------ */
  function initPairGroups() {  // numeric x categorical pair view: boxes, strips and group means
    var fig = readJSON("pair-group-figure");
    var box = $("pair-groups");
    if (!fig || !box || !window.Plotly) return;
    Plotly.newPlot(box, fig.data, fig.layout, PLOT_CONFIG).then(function () { box.dataset.ready = "1"; });
  }

  function initPair() {
    initPairGroups();
    var figs = readJSON("pair-figures");
    if (!figs || !window.Plotly) return;
    var scatter = $("pair-scatter");
    Plotly.newPlot(scatter, figs.scatter.data, figs.scatter.layout, PLOT_CONFIG).then(function () {
      scatter.dataset.ready = "1";
    });
    Plotly.newPlot($("pair-ranks"), figs.ranks.data, figs.ranks.layout, PLOT_CONFIG);
    if (figs.series && $("pair-series")) {
      var series = $("pair-series");
      Plotly.newPlot(series, figs.series.data, figs.series.layout, PLOT_CONFIG).then(function () {
        series.dataset.ready = "1";
      });
      Plotly.newPlot($("pair-xcorr"), figs.xcorr.data, figs.xcorr.layout, PLOT_CONFIG);
    }
    if (figs.residuals && $("pair-residuals")) {
      var resid = $("pair-residuals");
      Plotly.newPlot(resid, figs.residuals.data, figs.residuals.layout, PLOT_CONFIG).then(function () {
        resid.dataset.ready = "1";
      });
    }
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
    initPair();
  });
})();
