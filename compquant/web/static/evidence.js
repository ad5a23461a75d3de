// The sample's analysis page: embeds each Bokeh JSON item (data-chart), switches the calibration
// curves between linear and logarithmic axes, and re-lays out the spectrum's line labels after a
// zoom with the rule of compquant/web/labels.py (greedy rows by pixel distance, no overlap).
"use strict";
const CHAR_PX = 6.6, GAP_PX = 4;

function stagger(xs, widths) {
  const order = xs.map((x, i) => i).sort((a, b) => xs[a] - xs[b]);
  const rowEnd = [], rows = new Array(xs.length).fill(0);
  for (const i of order) {
    let r = rowEnd.findIndex((end) => end + GAP_PX <= xs[i]);
    if (r < 0) { r = rowEnd.length; rowEnd.push(0); }
    rows[i] = r;
    rowEnd[r] = xs[i] + widths[i];
  }
  return rows;
}

function relayout(doc, el) {
  const src = doc.get_model_by_name("line-labels"), fig = doc.get_model_by_name("spectrum");
  if (!src || !fig) { return; }
  const xr = fig.x_range, d = src.data, n = d.x.length;
  const width = Math.max(200, el.clientWidth - 70), span = (xr.end - xr.start) || 1;
  const inView = [], px = [], w = [];
  for (let i = 0; i < n; i++) {
    if (d.x[i] >= xr.start && d.x[i] <= xr.end) {
      inView.push(i); px.push((d.x[i] - xr.start) / span * width); w.push(String(d.text[i]).length * CHAR_PX);
    }
  }
  const r = stagger(px, w), nRows = Math.max(0, ...r) + 1, row = new Array(n).fill(0);
  inView.forEach((i, k) => { row[i] = r[k]; });
  const y = row.map((ri, i) => d.top[i] * (1.02 + 0.075 * (nRows - 1 - ri)));
  src.data = Object.assign({}, d, {row: row, y: y});
  const needed = (d.top[0] || 1) * (1.06 + 0.075 * nRows);
  if (fig.y_range.end < needed) { fig.y_range.end = needed; }
}

function embed(el) {
  el.replaceChildren();
  return fetch(el.dataset.chart)
    .then(function (r) { if (!r.ok) { throw new Error(r.status + " " + el.dataset.chart); } return r.json(); })
    .then(function (item) { return Bokeh.embed.embed_item(item, el.id); })
    .then(function () {
      if (el.id !== "ev-spectrum") { return; }
      const doc = Bokeh.documents.find((x) => x.get_model_by_name("line-labels"));
      if (!doc) { return; }
      const xr = doc.get_model_by_name("spectrum").x_range;
      let pending = null;
      const again = function () { clearTimeout(pending); pending = setTimeout(function () { relayout(doc, el); }, 30); };
      for (const name of ["start", "end"]) {
        const p = xr.properties ? xr.properties[name] : xr.property(name);
        p.change.connect(again);
      }
      el.dataset.labelsLaidOut = "1";
    })
    .catch(function (err) { el.textContent = "interactive plot not available: " + err.message; });
}

document.querySelectorAll("[data-chart]").forEach(embed);

const toggle = document.getElementById("log-toggle");
if (toggle) {
  toggle.addEventListener("click", function () {
    const log = toggle.dataset.scale !== "log";
    toggle.dataset.scale = log ? "log" : "linear";
    toggle.textContent = log ? "Linear axes" : "Logarithmic axes";
    document.querySelectorAll(".curve-chart").forEach(function (el) {
      const url = new URL(el.dataset.chart, window.location.href);
      url.searchParams.set("scale", log ? "log" : "linear");
      el.dataset.chart = url.pathname + url.search;
      embed(el);
    });
  });
}
