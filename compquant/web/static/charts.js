// Interactive control charts: each element with data-chart gets the Bokeh JSON item at that URL.
"use strict";
document.querySelectorAll("[data-chart]").forEach(function (el) {
  fetch(el.dataset.chart)
    .then(function (r) { if (!r.ok) { throw new Error(r.status + " " + el.dataset.chart); } return r.json(); })
    .then(function (item) { return Bokeh.embed.embed_item(item, el.id); })
    .catch(function (err) { el.textContent = "interactive chart not available: " + err.message; });
});
