/* Evenframe: the campaign's dataset statistics page. Draws plotly charts from #statistics-data (the JSON of
 * datasets.statistics.DatasetStatistics.as_json); the page's table holds the numbers without this file.
 * Class names may hold any character: they reach plotly's labels through plotlyText, never as markup. */
(function () {
  "use strict";
  var TEAL = "#1f7a74", SLATE = "#5b7c91", CORAL = "#d9825b", INK = "#1f2a33", GRID = "#e8edf0", MUTED = "#5c6b77";
  var PALETTE = [TEAL, CORAL, SLATE, "#8f6bb3", "#c9a227", "#3f8fc4", "#b5566e", "#6a9a3a", "#7d7d7d", "#2b5d73", "#a86f3d", "#4c9e91"];
  var SIZE_COLOURS = ["#9fd3cc", TEAL, INK];
  var CONFIG = { displayModeBar: false, responsive: true };

  function plotlyText(v) {
    return String(v).replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;");
  }
  function layout(extra) {
    var base = {
      margin: { l: 52, r: 14, t: 28, b: 44 }, paper_bgcolor: "rgba(0,0,0,0)", plot_bgcolor: "rgba(0,0,0,0)",
      font: { family: "system-ui, -apple-system, Segoe UI, Roboto, sans-serif", size: 12, color: INK },
      xaxis: { gridcolor: GRID, zerolinecolor: GRID, linecolor: GRID, automargin: true },
      yaxis: { gridcolor: GRID, zerolinecolor: GRID, linecolor: GRID, automargin: true },
      legend: { orientation: "h", y: 1.16, x: 0, font: { size: 11 } }, hoverlabel: { font: { size: 12 } }
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
  function fmt(v) { return Number(v).toLocaleString("en", { maximumFractionDigits: 3 }); }
  /* "lo–hi" labels of consecutive edges, then "≥ last" when there is an overflow count. */
  function binLabels(edges, overflow, unit) {
    var labels = [];
    for (var i = 0; i + 1 < edges.length; i++) labels.push(fmt(edges[i]) + "–" + fmt(edges[i + 1]));
    if (overflow) labels.push("≥ " + fmt(edges[edges.length - 1]) + (unit || ""));
    return labels;
  }
  function sum(a) { return a.reduce(function (x, y) { return x + y; }, 0); }
  function classesWith(s) { return s.classes.filter(function (n) { return s.per_class[n].instances > 0; }); }
  /* Grouped bars of each class's share per bin, the count in the hover. */
  function sharesChart(id, s, hist, labels, xTitle) {
    var names = classesWith(s);
    draw(id, names.map(function (name) {
      var counts = hist.counts[name], total = sum(counts);
      return { type: "bar", name: plotlyText(name), x: labels, y: counts.map(function (c) { return total ? c / total : 0; }),
        customdata: counts, marker: { color: PALETTE[s.classes.indexOf(name) % PALETTE.length] },
        hovertemplate: "%{x}: %{customdata} (%{y:.0%})<extra>" + plotlyText(name) + "</extra>" };
    }), { barmode: "group", bargap: 0.18, xaxis: { title: { text: xTitle }, type: "category", tickangle: -45 },
      yaxis: { title: { text: "share of the class" }, tickformat: ".0%", rangemode: "tozero" }, margin: { t: 44 } });
  }

  function sizeCharts(s) {
    var names = s.classes.map(plotlyText);
    draw("stat-size-classes", s.size_classes.names.map(function (size, k) {
      return { type: "bar", name: size, x: names, y: s.classes.map(function (n) { return s.size_classes.counts[n][k]; }),
        marker: { color: SIZE_COLOURS[k] } };
    }), { barmode: "stack", bargap: 0.3, yaxis: { title: { text: "instances" } }, margin: { t: 36 },
      title: { text: "COCO size class (mask area)", font: { size: 13 }, x: 0.01, y: 0.98 }, legend: { y: 1.0, x: 1, xanchor: "right", orientation: "v" } });
    var edges = s.box_side.edges, labels = binLabels(edges, true, "");
    var lines = [32, 96].map(function (limit) {
      var at = edges.indexOf(limit) - 0.5;
      return { type: "line", xref: "x", yref: "paper", x0: at, x1: at, y0: 0, y1: 1, line: { color: SLATE, dash: "dot", width: 1.5 } };
    });
    draw("stat-box-side", classesWith(s).map(function (name) {
      return { type: "bar", name: plotlyText(name), x: labels, y: s.box_side.counts[name],
        marker: { color: PALETTE[s.classes.indexOf(name) % PALETTE.length] } };
    }), { barmode: "stack", bargap: 0.12, shapes: lines, legend: { traceorder: "normal" },
      xaxis: { title: { text: "√(mask area), px" }, type: "category", tickangle: -45 },
      yaxis: { title: { text: "instances" } }, margin: { t: 44 } });
  }
  function perImageChart(s) {
    var h = s.instances_per_image;
    draw("stat-per-image", [{ type: "bar", x: h.values, y: h.counts, marker: { color: TEAL },
      hovertemplate: "%{x} instances: %{y} images<extra></extra>" }],
      { showlegend: false, bargap: 0.2, xaxis: { title: { text: "instances in the image" }, dtick: 1 },
        yaxis: { title: { text: "images" }, rangemode: "tozero" }, margin: { t: 12 } });
  }
  function coOccurrenceChart(s) {
    var names = s.classes.map(plotlyText), z = s.co_occurrence.counts;
    draw("stat-cooccurrence", [{ type: "heatmap", x: names, y: names, z: z, text: z.map(function (r) { return r.map(String); }),
      texttemplate: "%{text}", colorscale: [[0, "#f6f8f9"], [1, TEAL]], showscale: false, xgap: 2, ygap: 2,
      hovertemplate: "%{y} and %{x}: %{z} images<extra></extra>" }],
      { xaxis: { type: "category", side: "bottom", gridcolor: "rgba(0,0,0,0)" },
        yaxis: { type: "category", autorange: "reversed", gridcolor: "rgba(0,0,0,0)" }, margin: { l: 90, t: 12, b: 70 } });
  }
  function centresChart(s, name) {
    var c = s.box_centres, z = name ? c.counts[name] : c.total, size = s.image_sizes_px[0];
    var aspect = size ? size.width_px / size.height_px : 4 / 3;  // one x unit spans the width, one y unit the height
    var mid = function (edges) { return edges.slice(0, -1).map(function (e, i) { return (e + edges[i + 1]) / 2; }); };
    draw("stat-centres", [{ type: "heatmap", x: mid(c.x_edges), y: mid(c.y_edges), z: z, colorscale: [[0, "#f6f8f9"], [1, TEAL]],
      colorbar: { title: { text: "boxes" }, thickness: 12 }, xgap: 1, ygap: 1,
      hovertemplate: "x %{x:.2f}, y %{y:.2f}: %{z} boxes<extra></extra>" }],
      { xaxis: { range: [0, 1], title: { text: "x ÷ image width" }, constrain: "domain", scaleanchor: "y", scaleratio: aspect },
        yaxis: { range: [1, 0], title: { text: "y ÷ image height" } }, margin: { t: 12 } });
  }

  document.addEventListener("DOMContentLoaded", function () {
    var node = document.getElementById("statistics-data");
    if (!node) return;
    var s = JSON.parse(node.textContent);
    function drawAll() {
      sizeCharts(s);
      perImageChart(s);
      coOccurrenceChart(s);
      sharesChart("stat-visible", s, s.visible_fraction, binLabels(s.visible_fraction.edges, false), "visible fraction");
      sharesChart("stat-truncation", s, s.truncation_fraction, binLabels(s.truncation_fraction.edges, false), "truncation fraction");
      sharesChart("stat-distance", s, s.camera_distance, binLabels(s.camera_distance.edges, true, " m"), "camera distance, m");
      var select = document.getElementById("centre-class");
      centresChart(s, select ? select.value : "");
      if (select) select.addEventListener("change", function () { centresChart(s, select.value); });
    }
    if (window.Plotly) drawAll(); else window.addEventListener("load", drawAll);
  });
})();
