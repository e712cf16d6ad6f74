/* sitegen page scripts: draw charts, sort and filter tables. No network, works from file://. */
(function () {
  "use strict";

  function chartConfig() {
    var el = document.getElementById("chart-theme");
    var theme = el ? JSON.parse(el.textContent) : {};
    var dark = window.matchMedia && window.matchMedia("(prefers-color-scheme: dark)").matches;
    var c = (dark ? theme.dark : theme.light) || {};
    return {
      background: null,
      font: "system-ui, -apple-system, 'Segoe UI', Roboto, Arial, sans-serif",
      range: { category: c.category },
      mark: { color: c.mark },
      area: { color: c.mark }, line: { color: c.mark }, point: { color: c.mark }, rule: { color: c.domain },
      rect: { color: c.domain },
      axis: { labelColor: c.text, titleColor: c.text, gridColor: c.grid, domainColor: c.domain, tickColor: c.domain },
      legend: { labelColor: c.text, titleColor: c.text },
      title: { color: c.text },
      view: { stroke: c.grid }
    };
  }

  function drawCharts() {
    var specs = document.querySelectorAll("script.vl-spec");
    if (!specs.length) { return; }
    if (typeof window.vegaEmbed !== "function") {
      specs.forEach(function (s) {
        var t = document.getElementById(s.getAttribute("data-target"));
        if (t) { t.querySelector(".vis-fallback").textContent = "The chart library could not be loaded; the numbers are in the downloads."; }
      });
      return;
    }
    var config = chartConfig();
    specs.forEach(function (s) {
      var target = document.getElementById(s.getAttribute("data-target"));
      if (!target) { return; }
      var spec = JSON.parse(s.textContent);
      window.vegaEmbed(target, spec, { actions: false, renderer: "svg", config: config, tooltip: { theme: "custom" } })
        .then(function (res) {
          var svg = target.querySelector("svg");
          if (svg) { svg.setAttribute("aria-hidden", "true"); svg.setAttribute("focusable", "false"); }
          return res;
        })
        .catch(function (err) {
          target.textContent = "This chart could not be drawn: " + err.message;
        });
    });
  }

  function cellValue(row, index, type) {
    var cell = row.children[index];
    var raw = cell ? (cell.getAttribute("data-value") !== null ? cell.getAttribute("data-value") : cell.textContent) : "";
    if (type === "number") {
      var v = parseFloat(raw);
      return isNaN(v) ? null : v;
    }
    return raw.trim().toLowerCase();
  }

  function sortTable(table, index, type, button) {
    var th = button.closest("th");
    var ascending = th.getAttribute("aria-sort") !== "ascending";
    table.querySelectorAll("thead th").forEach(function (h) { if (h.hasAttribute("aria-sort")) { h.setAttribute("aria-sort", "none"); } });
    th.setAttribute("aria-sort", ascending ? "ascending" : "descending");
    var bodies = Array.prototype.slice.call(table.tBodies);
    var rows = [];
    bodies.forEach(function (b) { Array.prototype.forEach.call(b.rows, function (r) { if (!r.classList.contains("group-row")) { rows.push(r); } }); });
    rows.sort(function (a, b) {
      var x = cellValue(a, index, type), y = cellValue(b, index, type);
      if (x === null && y === null) { return 0; }
      if (x === null) { return 1; }
      if (y === null) { return -1; }
      var c = x < y ? -1 : x > y ? 1 : 0;
      return ascending ? c : -c;
    });
    table.classList.add("sorted");
    table.querySelectorAll("tr.group-row").forEach(function (g) { g.hidden = true; });
    var first = bodies[0];
    rows.forEach(function (r) { first.appendChild(r); });
  }

  function setupSorting() {
    document.querySelectorAll("table.sortable").forEach(function (table) {
      table.querySelectorAll("thead th button").forEach(function (button) {
        var th = button.closest("th");
        var index = Array.prototype.indexOf.call(th.parentNode.children, th);
        button.addEventListener("click", function () { sortTable(table, index, button.getAttribute("data-type"), button); });
      });
    });
  }

  function setupFilters() {
    document.querySelectorAll("form.filters").forEach(function (form) {
      var table = document.getElementById(form.getAttribute("data-filter-for"));
      if (!table) { return; }
      var params = new URLSearchParams(window.location.search);
      ["q", "status", "tag", "folder"].forEach(function (k) {
        if (params.has(k) && form.elements[k]) { form.elements[k].value = params.get(k); }
      });
      function apply() {
        var q = form.elements.q.value.trim().toLowerCase();
        var status = form.elements.status.value, tag = form.elements.tag.value, folder = form.elements.folder.value;
        var shown = 0, total = 0;
        table.querySelectorAll("tbody tr").forEach(function (r) {
          if (r.classList.contains("group-row")) { return; }
          total += 1;
          var ok = (!q || (r.getAttribute("data-search") || "").indexOf(q) >= 0) &&
            (!status || r.getAttribute("data-status") === status) &&
            (!tag || (r.getAttribute("data-tags") || "").split("|").indexOf(tag) >= 0) &&
            (!folder || r.getAttribute("data-folder") === folder);
          r.hidden = !ok;
          if (ok) { shown += 1; }
        });
        var filtering = q || status || tag || folder;
        if (!table.classList.contains("sorted")) {
          table.querySelectorAll("tbody").forEach(function (b) {
            var g = b.querySelector("tr.group-row");
            if (g) { g.hidden = !Array.prototype.some.call(b.rows, function (r) { return !r.classList.contains("group-row") && !r.hidden; }); }
          });
        }
        form.elements.shown.value = filtering ? shown + " of " + total + " datasets shown" : "";
      }
      form.addEventListener("input", apply);
      form.addEventListener("submit", function (e) { e.preventDefault(); });
      apply();
    });
  }

  document.addEventListener("DOMContentLoaded", function () {
    setupSorting();
    setupFilters();
    drawCharts();
  });
})();
