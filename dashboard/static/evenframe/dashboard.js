/* Evenframe dashboard: live updates and charts. Progressive: every page works without this file.
 * - campaign list: polls /campaigns/live.json and updates status, progress, spend and ETA;
 * - planner: fetches /campaigns/estimate.json as the form changes and fills the estimate panel;
 * - campaign page: draws the plotly charts from #chart-data and polls <id>/live.json every few seconds.
 * Names from the database (classes, campaigns, assets) may hold any character: rows are found by comparing
 * attribute values (byAttribute), never by building a selector from a name, and text reaches the page through
 * textContent or, for plotly's labels (which read a little HTML), through plotlyText. */
(function () {
  "use strict";
  var TEAL = "#1f7a74", TEAL_SOFT = "rgba(31,122,116,.14)", SLATE = "#5b7c91", CORAL = "#d9825b", INK = "#1f2a33",
      GRID = "#e8edf0", MUTED = "#5c6b77";
  var PALETTE = [TEAL, CORAL, SLATE, "#8f6bb3", "#c9a227", "#3f8fc4", "#b5566e", "#6a9a3a", "#7d7d7d", "#2b5d73", "#a86f3d", "#4c9e91"];
  var POLL_MS = 4000, IDLE_POLL_MS = 15000, COVERAGE_EVERY = 8;

  function $(sel, root) { return (root || document).querySelector(sel); }
  function $all(sel, root) { return Array.prototype.slice.call((root || document).querySelectorAll(sel)); }
  function get(obj, path) {
    return path.split(".").reduce(function (o, k) { return o == null ? undefined : o[k]; }, obj);
  }
  function text(v) { return v === null || v === undefined || v === "" ? "—" : String(v); }
  /* Amounts arrive as plain numbers; an element with data-money="2" (or "4" for per-unit prices) shows them as
   * "EUR 660.00", the code from <body data-currency>, as the server-side |money filter does. */
  function currency() { return document.body.getAttribute("data-currency") || ""; }
  function money(v, places) {
    if (v === null || v === undefined || v === "") return "—";
    var n = Number(v);
    if (!isFinite(n)) return "—";
    var code = currency();
    return (code ? code + " " : "") + n.toFixed(places);
  }
  function show(el, v) {
    el.textContent = el.hasAttribute("data-money") ? money(v, Number(el.getAttribute("data-money")) || 2) : text(v);
  }
  /* Elements matching a constant selector, keyed by the value of one of their attributes. */
  function byAttribute(sel, attr, root) {
    var out = Object.create(null);
    $all(sel, root).forEach(function (el) { out[el.getAttribute(attr)] = el; });
    return out;
  }
  function pill(kind, label) {
    var el = document.createElement("span");
    el.className = "pill " + kind;
    el.textContent = label;
    return el;
  }
  /* plotly reads <b>, <br>, <a href> and entities in labels: escape them so a name shows as it is. */
  function plotlyText(v) {
    return String(v).replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;");
  }
  function getJSON(url) {
    return fetch(url, { credentials: "same-origin", headers: { "Accept": "application/json" } }).then(function (r) {
      if (!r.ok) throw new Error("HTTP " + r.status);
      return r.json();
    });
  }

  /* --- campaign list --------------------------------------------------------------------------------------- */
  function listPage(root) {
    var url = root.getAttribute("data-list-live");
    function tick() {
      getJSON(url).then(function (data) {
        var rows = byAttribute("tr[data-campaign]", "data-campaign", root);
        data.campaigns.forEach(function (c) {
          var row = rows[String(c.id)];
          if (!row) return;
          var cells = byAttribute("[data-field]", "data-field", row);
          ["status_label", "progress_pct", "spent", "frames_done", "eta"].forEach(function (k) {
            if (cells[k]) show(cells[k], c[k]);
          });
          if (cells.status_label) cells.status_label.className = "pill status-" + c.status;
          if (cells.progress_bar) cells.progress_bar.style.width = c.progress_pct + "%";
          if (cells.spent_bar) cells.spent_bar.style.width = Math.min(100, c.spent_pct) + "%";
        });
      }).catch(function () {}).then(function () { setTimeout(tick, 5000); });
    }
    setTimeout(tick, 5000);
  }

  /* --- planner estimate ------------------------------------------------------------------------------------ */
  function plannerPage(form, panel) {
    var url = panel.getAttribute("data-url"), timer = null, seq = 0;
    var body = $(".estimate-body", panel), empty = $(".estimate-empty", panel), err = $(".estimate-error", panel);
    function verdict(e) {
      if (!e.within_budget) return pill("bad", "over budget");
      return e.cheaper ? pill("ok", "cheaper than labelling by hand") : pill("warn", "dearer than labelling by hand");
    }
    function update() {
      var params = new URLSearchParams(new FormData(form));
      params.delete("csrfmiddlewaretoken");
      var mine = ++seq;
      panel.classList.add("loading");
      getJSON(url + "?" + params.toString()).then(function (data) {
        if (mine !== seq) return;
        panel.classList.remove("loading");
        if (!data.ok) {
          var first = Object.keys(data.errors)[0];
          err.textContent = "Waiting for valid input" + (first ? ": " + (first === "__all__" ? "" : first.replace(/^[bq]_/, "").replace(/_/g, " ") + " — ") + data.errors[first][0] : ".");
          err.hidden = false;
          return;
        }
        err.hidden = true; body.hidden = false; empty.hidden = true;
        var e = data.estimate;
        $all("[data-est]", panel).forEach(function (el) {
          var k = el.getAttribute("data-est");
          if (k === "verdict") { el.replaceChildren(verdict(e)); return; }
          if (k === "fleet_time") { el.textContent = e.fleet_time || "no live worker"; return; }
          if (k === "instances_per_frame") { el.textContent = Math.round(e[k]); return; }
          if (k === "library") {
            el.replaceChildren.apply(el, (e.library || []).map(function (item) {
              var li = document.createElement("li");
              li.textContent = item.name + ": creation " + money(item.creation_cost, 2) + ", " + item.frames_so_far +
                " frame" + (item.frames_so_far === 1 ? "" : "s") + " so far, ≈ " + item.frames_planned + " here → " + money(item.share, 2);
              return li;
            }));
            return;
          }
          show(el, e[k]);
        });
      }).catch(function () { panel.classList.remove("loading"); });
    }
    function schedule() { clearTimeout(timer); timer = setTimeout(update, 350); }
    form.addEventListener("input", schedule);
    form.addEventListener("change", schedule);
    update();
  }

  /* --- campaign page: charts -------------------------------------------------------------------------------- */
  var CONFIG = { displayModeBar: false, responsive: true };
  function layout(extra) {
    var base = {
      margin: { l: 52, r: 14, t: 28, b: 40 }, paper_bgcolor: "rgba(0,0,0,0)", plot_bgcolor: "rgba(0,0,0,0)",
      font: { family: "system-ui, -apple-system, Segoe UI, Roboto, sans-serif", size: 12, color: INK },
      xaxis: { gridcolor: GRID, zerolinecolor: GRID, linecolor: GRID }, yaxis: { gridcolor: GRID, zerolinecolor: GRID, linecolor: GRID },
      legend: { orientation: "h", y: 1.14, x: 0, font: { size: 11 } }, hoverlabel: { font: { size: 12 } }
    };
    Object.keys(extra || {}).forEach(function (k) {
      if (typeof extra[k] === "object" && !Array.isArray(extra[k]) && base[k]) base[k] = Object.assign({}, base[k], extra[k]);
      else base[k] = extra[k];
    });
    return base;
  }
  function draw(id, traces, lay) {
    var el = document.getElementById(id);
    if (!el || !window.Plotly) return;
    window.Plotly.react(el, traces, layout(lay), CONFIG);
  }
  function balanceChart(live) {
    var names = live.quotas.map(function (q) { return plotlyText(q.class_name); });
    draw("chart-balance", [
      { type: "bar", name: "quota", x: names, y: live.quotas.map(function (q) { return q.target; }),
        marker: { color: "rgba(0,0,0,0)", line: { color: SLATE, width: 1.5 } } },
      { type: "bar", name: "accepted", x: names, y: live.quotas.map(function (q) { return q.accepted; }), marker: { color: TEAL } },
      { type: "bar", name: "rejected", x: names, y: live.quotas.map(function (q) { return q.rejected; }), marker: { color: CORAL } }
    ], { barmode: "group", bargap: 0.25, yaxis: { title: { text: "instances" } } });
  }
  function amortizationChart(live) {
    var s = live.series, manual = s.manual_cost_per_instance, x = s.frames, y = s.cost_per_accepted;
    var traces = [
      { type: "scatter", mode: "lines+markers", name: "cost per accepted instance", x: x, y: y, line: { color: TEAL, width: 2.5 }, marker: { size: 4 } },
      { type: "scatter", mode: "lines", name: "labelling by hand", x: [0, Math.max(1, x.length ? x[x.length - 1] : 1, live.break_even_frames || 0)],
        y: [manual, manual], line: { color: CORAL, dash: "dash", width: 2 } }
    ];
    var shapes = [], annotations = [];
    if (live.break_even_frames !== null && live.break_even_frames !== undefined) {
      shapes.push({ type: "line", x0: live.break_even_frames, x1: live.break_even_frames, yref: "paper", y0: 0, y1: 1, line: { color: SLATE, dash: "dot", width: 1.5 } });
      annotations.push({ x: live.break_even_frames, yref: "paper", y: 0.92, xanchor: "right", text: "break-even at " + live.break_even_frames + " frames ", showarrow: false, font: { size: 11, color: MUTED } });
    }
    draw("chart-amortization", traces, { title: { text: "Amortization", font: { size: 13 }, x: 0.01 }, xaxis: { title: { text: "frames done" } },
      yaxis: { title: { text: "cost per accepted instance (" + currency() + ")" }, type: "log", dtick: 1 }, shapes: shapes, annotations: annotations, margin: { t: 44 } });
  }
  function costChart(live) {
    var s = live.series;
    // Per 1,000 frames: a frame's compute often costs a fraction of a cent, which reads badly on an axis.
    draw("chart-cost", [{ type: "scatter", mode: "lines+markers", name: "compute cost per 1,000 frames", x: s.times,
      y: s.cost_per_frame.map(function (v) { return v * 1000; }), line: { color: SLATE, width: 2 }, marker: { size: 4 } }],
      { title: { text: "Compute cost per 1,000 frames over time (" + s.bucket_frames + " frame" + (s.bucket_frames > 1 ? "s" : "") + " per point)", font: { size: 13 }, x: 0.01 },
        showlegend: false, xaxis: { type: "date", tickformat: "%H:%M:%S" }, yaxis: { title: { text: currency() + " per 1,000 frames" }, rangemode: "tozero" }, margin: { t: 36 } });
  }
  function throughputChart(live) {
    var t = live.throughput;
    draw("chart-throughput", [{ type: "bar", name: "frames", x: t.minutes, y: t.frames, width: 50000, marker: { color: TEAL } }],
      { showlegend: false, xaxis: { type: "date", tickformat: "%H:%M", range: t.minutes.length ? [
          new Date(new Date(t.minutes[0]).getTime() - 5 * 60000).toISOString(), new Date(Math.max(Date.now(), new Date(t.minutes[t.minutes.length - 1]).getTime() + 60000)).toISOString()] : undefined },
        yaxis: { title: { text: "frames per minute" }, rangemode: "tozero" }, margin: { t: 12 } });
  }
  var COVERAGE = [
    ["eye_height_m", "Camera height", "m", false], ["focal_length_mm", "Focal length", "mm", false],
    ["f_number", "f-number", "", false], ["iso", "ISO (sampled)", "", true]
  ];
  /* One histogram per light kind over a shared axis, each kind's own range shaded in its colour. */
  function perKindChart(id, title, values, ranges) {
    var kinds = Object.keys(values || {}).sort(), shapes = [];
    var traces = kinds.map(function (kind, i) {
      var r = ranges[kind];
      if (r) shapes.push({ type: "rect", xref: "x", yref: "paper", x0: r[0], x1: r[1], y0: 0, y1: 1, fillcolor: PALETTE[i % PALETTE.length], opacity: 0.09, line: { width: 0 }, layer: "below" });
      return { type: "histogram", name: plotlyText(kind), x: values[kind], nbinsx: 24, opacity: 0.75, marker: { color: PALETTE[i % PALETTE.length] } };
    });
    draw(id, traces, { title: { text: title, font: { size: 13 }, x: 0.01 }, barmode: "overlay",
      shapes: shapes, margin: { l: 40, r: 10, t: 30, b: 30 }, legend: { y: 1.0, x: 1, xanchor: "right", orientation: "v" } });
  }
  function rangeShape(range) {
    if (!range) return [];
    return [{ type: "rect", xref: "x", yref: "paper", x0: range[0], x1: range[1], y0: 0, y1: 1, fillcolor: TEAL_SOFT, line: { width: 0 }, layer: "below" }];
  }
  function coverageCharts(cov) {
    if (!cov || !cov.frames_read) return;
    COVERAGE.forEach(function (c) {
      var key = c[0], values = cov.values[key] || [], range = cov.ranges[key], log = c[3];
      var xs = log ? values.map(function (v) { return Math.log10(v); }) : values;
      var shape = range ? (log ? [Math.log10(range[0]), Math.log10(range[1])] : range) : null;
      draw("cov-" + key, [{ type: "histogram", x: xs, nbinsx: 24, marker: { color: TEAL, line: { color: "#fff", width: 1 } } }],
        { title: { text: c[1] + (c[2] ? " (" + c[2] + ")" : "") + (log ? ", log₁₀" : ""), font: { size: 13 }, x: 0.01 },
          showlegend: false, shapes: rangeShape(shape), margin: { l: 40, r: 10, t: 30, b: 30 }, yaxis: { title: { text: "" } } });
    });
    perKindChart("cov-flux", "Light intensity (lm) by kind", cov.flux, cov.flux_ranges || {});
    perKindChart("cov-cct_k", "Colour temperature (K) by light kind", cov.cct, cov.cct_ranges || {});
    var classes = Object.keys(cov.azimuth_deg || {}).sort();
    draw("cov-azimuth", classes.map(function (name, i) {
      return { type: "histogram", name: plotlyText(name), x: cov.azimuth_deg[name], xbins: { start: 0, end: 360, size: 30 },
        histnorm: "probability", marker: { color: PALETTE[i % PALETTE.length] } };
    }), { title: { text: "Viewing angle per class: camera azimuth around the object, 0° = front (budget: any angle)", font: { size: 13 }, x: 0.01 },
      barmode: "group", xaxis: { range: [0, 360], dtick: 30, title: { text: "degrees" } }, yaxis: { title: { text: "share of placements" } },
      shapes: rangeShape([0, 360]), margin: { t: 60 }, legend: { y: 1.12 } });
  }

  /* --- campaign page: live values --------------------------------------------------------------------------- */
  function applyLive(live) {
    $all("[data-live]").forEach(function (el) {
      var key = el.getAttribute("data-live");
      if (key === "pause_text") {
        el.textContent = live.pause_reason ? live.pause_reason + (live.pause_detail ? ": " + live.pause_detail : "") : "";
        return;
      }
      show(el, get(live, key));
      if (key === "status_label") el.className = "pill status-" + live.status;
    });
    $all("[data-live-bar]").forEach(function (el) {
      el.style.width = Math.min(100, Number(get(live, el.getAttribute("data-live-bar"))) || 0) + "%";
    });
    var quotaRows = byAttribute("#quota-table tr[data-class]", "data-class");
    live.quotas.forEach(function (q) {
      var row = quotaRows[q.class_name];
      if (!row) return;
      var cells = byAttribute("[data-q]", "data-q", row);
      cells.accepted.textContent = q.accepted;
      cells.rejected.textContent = q.rejected;
      cells.yield.textContent = q.yield.toFixed(2);
      cells.bar.style.width = q.pct + "%";
      if (q.met) cells.met.replaceChildren(pill("ok", "met")); else cells.met.replaceChildren();
    });
    var fleet = $("#fleet-table tbody");
    if (fleet) {
      fleet.innerHTML = "";
      if (!live.fleet.length) {
        fleet.innerHTML = '<tr><td colspan="6" class="muted">No live worker. Start one with <code>manage.py render_worker</code>.</td></tr>';
      }
      live.fleet.forEach(function (w) {
        var tr = document.createElement("tr");
        [w.hostname, w.concurrency, w.variant, w.frames_per_hour, Math.round(w.cpu_use * 100) + " %", w.last_seen_s + " s ago"].forEach(function (v) {
          var td = document.createElement("td"); td.textContent = text(v); tr.appendChild(td);
        });
        fleet.appendChild(tr);
      });
    }
    balanceChart(live); amortizationChart(live); costChart(live); throughputChart(live);
  }

  function campaignPage(root) {
    var url = root.getAttribute("data-live-url"), polls = 0;
    var data = JSON.parse(document.getElementById("chart-data").textContent);
    function drawAll() { applyLive(data.live); coverageCharts(data.coverage); }
    if (window.Plotly) drawAll(); else window.addEventListener("load", drawAll);
    function tick() {
      polls += 1;
      var withCoverage = polls % COVERAGE_EVERY === 0;
      getJSON(url + (withCoverage ? "?coverage=1" : "")).then(function (live) {
        data.live = live;
        root.setAttribute("data-status", live.status);
        applyLive(live);
        if (live.coverage) coverageCharts(live.coverage);
      }).catch(function () {}).then(function () {
        var active = root.getAttribute("data-status") === "running";
        setTimeout(tick, active ? POLL_MS : IDLE_POLL_MS);
      });
    }
    setTimeout(tick, POLL_MS);
  }

  document.addEventListener("DOMContentLoaded", function () {
    var list = $("[data-list-live]"); if (list) listPage(list);
    var form = $("#planner-form"), panel = $("#estimate"); if (form && panel) plannerPage(form, panel);
    var live = $("#live-root"); if (live && document.getElementById("chart-data")) campaignPage(live);
  });
})();
