/* sitegen page scripts: draw charts in the theme's colours, sort and filter the index table.
   Plain browser JavaScript: no network, works from file://. Everything stays inside this function
   because the chart bundle defines many short global names. */
(function () {
  "use strict";

  /* Used when a theme's theme.toml leaves a colour out. */
  var FALLBACK = {
    light: { category: ["#b3471d", "#4d7325", "#7a4f9a", "#8a6700", "#a3345f", "#3d3d3d", "#2b6a89"],
             mark: "#1f6f5c", flag: "#a4286a", text: "#1d2733", muted: "#4f5a66", grid: "#e6e3dc", domain: "#7c828a",
             band: "#1f6f5c", density: "#56606b" },
    dark: { category: ["#f0a070", "#a8d27a", "#c9a6f0", "#e8c85a", "#f08fb5", "#d0d0d0", "#7fc1e0"],
            mark: "#6fd1b5", flag: "#f29cc8", text: "#e6e9ee", muted: "#b3bcc7", grid: "#333b45", domain: "#8a93a0",
            band: "#6fd1b5", density: "#b8c2cc" }
  };

  function media(query) {
    return window.matchMedia ? window.matchMedia(query) : { matches: false, addEventListener: null };
  }
  var darkQuery = media("(prefers-color-scheme: dark)");
  var printQuery = media("print");

  function scheme() {
    /* Paper is white: print always uses the light colours. */
    return darkQuery.matches && !printQuery.matches ? "dark" : "light";
  }

  function colours(name) {
    var el = document.getElementById("chart-theme");
    var theme = {};
    try { theme = el ? JSON.parse(el.textContent) : {}; } catch (e) { theme = {}; }
    var given = theme[name] || {};
    var base = FALLBACK[name];
    var out = {};
    Object.keys(base).forEach(function (k) { out[k] = given[k] !== undefined ? given[k] : base[k]; });
    return out;
  }

  function chartConfig(name) {
    var c = colours(name);
    var axis = { labelOverlap: "greedy", labelSeparation: 6, labelFlush: true,
                 labelColor: c.text, titleColor: c.text, gridColor: c.grid, domainColor: c.domain,
                 tickColor: c.domain, labelFontSize: 11, titleFontSize: 12, titleFontWeight: 600 };
    return {
      background: null,
      font: "system-ui, -apple-system, 'Segoe UI', Roboto, Arial, sans-serif",
      range: { category: c.category },
      mark: { color: c.mark },
      area: { color: c.band }, line: { color: c.mark }, point: { color: c.mark }, rule: { color: c.domain },
      rect: { color: c.density }, text: { color: c.text },
      axis: axis,
      legend: { labelColor: c.text, titleColor: c.text, symbolFillColor: c.muted,
                labelFontSize: 11, titleFontSize: 11, titleFontWeight: 600, symbolSize: 60, columnPadding: 14 },
      header: { labelColor: c.text, titleColor: c.text },
      title: { color: c.text },
      view: { stroke: c.grid }
    };
  }

  /* Flagged points get the theme's flag colour (they also differ by shape and size). */
  function kindColours(spec, c) {
    (spec.layer || [spec]).forEach(function (layer) {
      var colour = layer.encoding && layer.encoding.color;
      if (colour && colour.field === "kind") {
        colour.scale = colour.scale || {};
        colour.scale.range = [c.mark, c.flag];
      }
    });
    return spec;
  }

  /* Faceted charts cannot take the container's width by themselves; give them its width here. */
  function fitFacet(spec, target) {
    if (spec.facet && spec.spec && typeof spec.spec.width === "number" && target.clientWidth > 0) {
      var width = Math.max(160, Math.min(640, target.clientWidth - 40));
      spec.spec.width = width;
      /* row headings above each panel: no wider than the panel, so a phone or the paper holds them */
      var row = spec.facet.row;
      if (row && row.header) { row.header.labelLimit = width; }
    }
    return spec;
  }

  /* Charts that borrow the points of another chart on the page (see charts.py). */
  function meta(spec, key) {
    return spec.usermeta && spec.usermeta.sitegen ? spec.usermeta.sitegen[key] : undefined;
  }

  var charts = [];  /* { target, spec, view, label } */
  var drawnScheme = null;
  var generation = 0;

  function collect() {
    var lent = {};
    document.querySelectorAll("script.vl-spec").forEach(function (s) {
      var target = document.getElementById(s.getAttribute("data-target"));
      if (!target) { return; }
      var spec;
      try { spec = JSON.parse(s.textContent); } catch (e) { fail(target, "its description is damaged"); return; }
      /* Points are lent within one dataset: the page, or its section of a single-file report. */
      var holder = s.closest("[data-chart-scope]");
      var scope = (holder ? holder.getAttribute("data-chart-scope") : "") + "|";
      var lend = meta(spec, "lend");
      if (lend) {
        Object.keys(lend).forEach(function (name) {
          lent[scope + lend[name] + "/" + name] = JSON.stringify((spec.datasets || {})[name] || []);
        });
      }
      charts.push({ target: target, spec: spec, view: null, scope: scope,
                    label: target.getAttribute("aria-label") || "Chart" });
    });
    charts.forEach(function (c) {
      var borrow = meta(c.spec, "borrow");
      if (!borrow) { return; }
      Object.keys(borrow).forEach(function (name) {
        var text = lent[c.scope + borrow[name] + "/" + name];
        if (text !== undefined) { c.spec.datasets[name] = JSON.parse(text); }
      });
    });
  }

  function fail(target, why) {
    target.textContent = "";
    var p = document.createElement("p");
    p.className = "vis-fallback";
    p.textContent = "This chart could not be drawn (" + why + "); the numbers are in the linked file.";
    target.appendChild(p);
  }

  /* Chart expressions are evaluated by Vega's interpreter, not compiled to JavaScript: the pages' security
     policy allows no evaluation of text as code. */
  function embedOptions(config) {
    var opts = { actions: false, renderer: "svg", config: config, ast: true };
    if (window.vega && window.vega.expressionInterpreter) { opts.expr = window.vega.expressionInterpreter; }
    return opts;
  }

  function draw() {
    if (!charts.length) { return; }
    if (typeof window.vegaEmbed !== "function") {
      charts.forEach(function (c) { fail(c.target, "the chart library did not load"); });
      return;
    }
    var name = scheme();
    if (name === drawnScheme) { return; }
    drawnScheme = name;
    generation += 1;
    var mine = generation;
    var config = chartConfig(name);
    var cs = colours(name);
    charts.forEach(function (c) {
      if (c.view) { c.view.finalize(); c.view = null; }
      window.vegaEmbed(c.target, fitFacet(kindColours(c.spec, cs), c.target), embedOptions(config))
        .then(function (res) {
          if (mine !== generation) { res.view.finalize(); return; }  /* a newer drawing has started */
          c.view = res.view;
          /* The chart keeps its own text alternative (vega-embed puts a generic one in its place);
             the drawing inside is hidden from assistive technology. */
          c.target.setAttribute("role", "img");
          c.target.setAttribute("aria-label", c.label);
          c.target.removeAttribute("aria-roledescription");
          var svg = c.target.querySelector("svg");
          if (svg) { svg.setAttribute("aria-hidden", "true"); svg.setAttribute("focusable", "false"); }
          c.target.classList.add("drawn");
        })
        .catch(function (err) { if (mine === generation) { fail(c.target, err && err.message ? err.message : "unknown error"); } });
    });
  }

  function watch(query) {
    if (query.addEventListener) { query.addEventListener("change", draw); }
  }

  /* ---- the index table: sort and filter ----
     Each table's rows are read once into a list (their filter attributes, and each column's sort key when that
     column is first sorted). Sorting and filtering work on the list; the page then holds the rows to show.
     A table of more than WINDOW rows (or its data-window) shows the first WINDOW that match, with buttons for
     more: a browser lays out every row it shows, and 5,000 rows took seconds to lay out after each sort (rows
     not shown are kept out of the page, so they cost nothing). Smaller tables keep every row in the page, hiding
     the others. The index is written with only its first rows in the table (see restRows). */

  var WINDOW = 200;
  var tables = {};  /* table id -> { table, items, sorted, window, limit, attached, more } */

  function cellValue(row, index, type) {
    var cell = row.children[index];
    var raw = cell ? (cell.getAttribute("data-value") !== null ? cell.getAttribute("data-value") : cell.textContent) : "";
    if (type === "number") {
      var v = parseFloat(raw);
      return isNaN(v) ? null : v;
    }
    return raw.trim().toLowerCase();
  }

  function dataRows(table) {
    var rows = [];
    Array.prototype.forEach.call(table.tBodies, function (b) {
      Array.prototype.forEach.call(b.rows, function (r) { if (!r.classList.contains("group-row")) { rows.push(r); } });
    });
    return rows;
  }

  /* The rows after the first ones travel in a <noscript> after the table (a second table when scripts are off;
     one text node when they are on, so that the browser neither builds nor lays them out at load). They are
     parsed here into rows kept out of the page, each with its folder's group in the table as its home. */
  function restRows(table) {
    var holder = document.querySelector('noscript[data-rows-for="' + table.id + '"]');
    if (!holder) { return []; }
    var parsed = document.createElement("template");
    parsed.innerHTML = holder.textContent;
    var rows = [];
    Array.prototype.forEach.call(parsed.content.querySelectorAll("tbody[data-home]"), function (b) {
      var home = document.getElementById(b.getAttribute("data-home"));
      var own = b.querySelectorAll("tr:not(.group-row)");
      Array.prototype.forEach.call(own, function (r) { b.removeChild(r); rows.push({ row: r, home: null }); });
      if (!home || home.parentNode !== table) {
        home = document.importNode(b, true);
        home.id = b.getAttribute("data-home");
        home.removeAttribute("data-home");
        table.appendChild(home);
      }
      rows.slice(rows.length - own.length).forEach(function (it) { it.home = home; });
    });
    labelRows(table, rows.map(function (it) { return it.row; }));
    return rows;
  }

  function stateOf(table) {
    var state = tables[table.id];
    if (state) { return state; }
    var shown = dataRows(table).map(function (r) { return { row: r, home: r.parentNode }; });
    var items = shown.concat(restRows(table)).map(function (place, i) {
      var r = place.row;
      return { row: r, home: place.home, order: i, ok: true, keys: {},
               search: r.getAttribute("data-search") || "", status: r.getAttribute("data-status"),
               req: r.getAttribute("data-requirements"), folder: r.getAttribute("data-folder"),
               tags: (r.getAttribute("data-tags") || "").split("|") };
    });
    var size = parseInt(table.getAttribute("data-window") || "", 10);
    size = size > 0 ? size : WINDOW;
    /* a small table keeps every row in the page; one with rows still out of it is never small */
    state = { table: table, items: items, sorted: null, window: size, limit: size,
              small: items.length <= size && shown.length === items.length,
              attached: items.slice(0, shown.length), more: null };
    tables[table.id] = state;
    return state;
  }

  /* Put the rows to show into the page (see above), hide the folder headings with nothing under them, and
     offer the rows beyond the window. Returns how many rows match. */
  function render(state) {
    var table = state.table;
    var list = state.sorted || state.items;
    var small = state.small;
    var shown = [];
    var matched = 0;
    list.forEach(function (it) {
      if (it.ok) { matched += 1; }
      if (small || (it.ok && matched <= state.limit)) { shown.push(it); }
    });
    if (!small || state.sorted) {
      if (!small) { state.attached.forEach(function (it) { if (it.row.parentNode) { it.row.parentNode.removeChild(it.row); } }); }
      var into = state.sorted ? [table.tBodies[0]] : null;
      var fragment = document.createDocumentFragment();
      var body = into ? into[0] : null;
      shown.forEach(function (it) {
        var target = into ? into[0] : it.home;
        if (target !== body) { if (body) { body.appendChild(fragment); } body = target; }
        fragment.appendChild(it.row);
      });
      if (body) { body.appendChild(fragment); }
    }
    shown.forEach(function (it) { it.row.hidden = !it.ok; });
    state.attached = shown;
    if (!state.sorted) {
      Array.prototype.forEach.call(table.tBodies, function (b) {
        var g = b.querySelector("tr.group-row");
        if (g) { g.hidden = !Array.prototype.some.call(b.rows, function (r) { return !r.classList.contains("group-row") && !r.hidden; }); }
      });
    }
    offerMore(state, matched, small ? matched : Math.min(matched, state.limit));
    return matched;
  }

  function offerMore(state, matched, drawn) {
    var box = state.more;
    if (!box) {
      if (state.small) { return; }
      box = document.createElement("p");
      box.className = "more-rows";
      box.id = state.table.id + "-more";
      var note = document.createElement("span");
      var next = document.createElement("button");
      var all = document.createElement("button");
      next.type = "button"; all.type = "button";
      next.addEventListener("click", function () { state.limit += state.window; render(state); });
      all.addEventListener("click", function () { state.limit = Infinity; render(state); });
      box.appendChild(note); box.appendChild(next); box.appendChild(all);
      var wrap = state.table.closest(".table-wrap") || state.table;
      wrap.parentNode.insertBefore(box, wrap.nextSibling);
      state.more = box;
    }
    var rest = matched - drawn;
    box.hidden = rest <= 0;
    box.children[0].textContent = "Showing " + drawn + " of " + matched + " rows. ";
    box.children[1].textContent = "Show " + Math.min(state.window, rest) + " more";
    box.children[2].textContent = "Show all " + matched;
  }

  function sortTable(table, th, type) {
    var index = Array.prototype.indexOf.call(th.parentNode.children, th);
    var ascending = th.getAttribute("aria-sort") !== "ascending";
    table.querySelectorAll("thead th[aria-sort]").forEach(function (h) { h.setAttribute("aria-sort", "none"); });
    th.setAttribute("aria-sort", ascending ? "ascending" : "descending");
    var state = stateOf(table);
    state.items.forEach(function (it) {
      if (!(index in it.keys)) { it.keys[index] = cellValue(it.row, index, type); }
    });
    state.sorted = state.items.slice().sort(function (a, b) {
      var x = a.keys[index], y = b.keys[index];
      if (x === null && y === null) { return a.order - b.order; }
      if (x === null) { return 1; }   /* empty cells last in either direction */
      if (y === null) { return -1; }
      var c = x < y ? -1 : x > y ? 1 : 0;
      if (c === 0) { return a.order - b.order; }
      return ascending ? c : -c;
    });
    /* Sorted rows leave their folder groups; the folder stays visible in its own column. */
    table.classList.add("sorted");
    table.querySelectorAll("tr.group-row").forEach(function (g) { g.hidden = true; });
    state.limit = state.window;
    render(state);
    var status = document.getElementById(table.id + "-sort-status");
    if (status) {
      status.textContent = "Sorted by " + th.textContent.trim() + (ascending ? ", ascending." : ", descending.");
    }
  }

  function setupSorting() {
    document.querySelectorAll("table.sortable").forEach(function (table) {
      table.querySelectorAll("thead th button").forEach(function (button) {
        var th = button.closest("th");
        button.addEventListener("click", function () { sortTable(table, th, button.getAttribute("data-type")); });
      });
      narrowSort(table);
    });
  }

  /* Narrow screens stack the rows as cards and hide the headings: a list sorts by the same columns. */
  function narrowSort(table) {
    var select = document.querySelector('select[data-sort-for="' + table.id + '"]');
    if (!select) { return; }
    var buttons = table.querySelectorAll("thead th button");
    Array.prototype.forEach.call(buttons, function (button, i) {
      var name = button.textContent.replace(/[↕↑↓]/g, "").trim();
      var words = button.getAttribute("data-type") === "number" ? [", low to high", ", high to low"] : [", A to Z", ", Z to A"];
      ["ascending", "descending"].forEach(function (way, k) {
        var o = document.createElement("option");
        o.value = i + " " + way;
        o.textContent = name + words[k];
        select.appendChild(o);
      });
    });
    select.addEventListener("change", function () {
      if (!select.value) { return; }
      var parts = select.value.split(" ");
      var button = buttons[Number(parts[0])];
      if (!button) { return; }
      var th = button.closest("th");
      /* sortTable turns an ascending column descending and anything else ascending */
      th.setAttribute("aria-sort", parts[1] === "ascending" ? "none" : "ascending");
      sortTable(table, th, button.getAttribute("data-type"));
    });
  }

  function setupFilters() {
    document.querySelectorAll("form.filters").forEach(function (form) {
      var table = document.getElementById(form.getAttribute("data-filter-for"));
      if (!table) { return; }
      var params = new URLSearchParams(window.location.search);
      ["q", "status", "requirements", "tag", "folder"].forEach(function (k) {
        var el = form.elements[k];
        if (!el || !params.has(k)) { return; }
        var value = params.get(k);
        if (el.tagName === "SELECT" && !Array.prototype.some.call(el.options, function (o) { return o.value === value; })) { return; }
        el.value = value;
      });
      function apply() {
        var q = form.elements.q.value.trim().toLowerCase();
        var status = form.elements.status.value, tag = form.elements.tag.value, folder = form.elements.folder.value;
        var req = form.elements.requirements ? form.elements.requirements.value : "";
        var state = stateOf(table);
        state.items.forEach(function (it) {
          it.ok = (!q || it.search.indexOf(q) >= 0) && (!status || it.status === status) &&
            (!req || it.req === req) && (!tag || it.tags.indexOf(tag) >= 0) && (!folder || it.folder === folder);
        });
        state.limit = state.window;
        var shown = render(state);
        var total = state.items.length;
        var empty = document.getElementById(table.id + "-empty");
        if (empty) { empty.hidden = shown > 0; }
        var filtering = q || status || req || tag || folder;
        form.elements.shown.value = filtering ? shown + " of " + total + " datasets shown" : total + " datasets";
      }
      form.addEventListener("input", apply);
      form.addEventListener("change", apply);
      form.addEventListener("reset", function () { window.setTimeout(apply, 0); });
      form.addEventListener("submit", function (e) { e.preventDefault(); });
      apply();
    });
  }

  /* ---- narrow screens: every table of numbers can be read as one card per row ----
     Each cell is labelled with its column heading (data-label); the style sheet stacks the cells under
     40rem, so that no column, the status included, hides behind a horizontal scroll. */

  function labelRows(table, rows) {
    var heads = table.tHead ? table.tHead.rows[table.tHead.rows.length - 1].cells : [];
    if (!heads.length) { return false; }
    var names = Array.prototype.map.call(heads, function (th) { return th.textContent.replace(/[↕↑↓]/g, "").trim(); });
    rows.forEach(function (row) {
      if (row.classList.contains("group-row")) { return; }
      var col = 0;
      Array.prototype.forEach.call(row.cells, function (cell) {
        if (!cell.hasAttribute("data-label") && names[col]) { cell.setAttribute("data-label", names[col]); }
        col += cell.colSpan || 1;
      });
    });
    return true;
  }

  function labelCells() {
    document.querySelectorAll("table.numbers").forEach(function (table) {
      var rows = [];
      Array.prototype.forEach.call(table.tBodies, function (body) { rows = rows.concat(Array.prototype.slice.call(body.rows)); });
      if (labelRows(table, rows)) { table.classList.add("stackable"); }
    });
  }

  function start() {
    labelCells();
    setupSorting();
    setupFilters();
    collect();
    draw();
    watch(darkQuery);
    watch(printQuery);
    window.addEventListener("beforeprint", draw);
    window.addEventListener("afterprint", draw);
  }

  if (document.readyState === "loading") { document.addEventListener("DOMContentLoaded", start); } else { start(); }
})();
