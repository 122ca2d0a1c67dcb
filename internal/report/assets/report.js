/* flowset report: draws the charts described in the JSON block "fs-data".
   Constant code. No text from the report's data is ever run as code here:
   custom series name one of the renderers below, anything else draws nothing. */
(function () {
  "use strict";
  var FONT = 'system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans", "Liberation Sans", Arial, sans-serif';

  function seg(a, b, color, w) {
    return { type: "line", shape: { x1: a[0], y1: a[1], x2: b[0], y2: b[1] }, style: { stroke: color, lineWidth: w } };
  }
  function num(v) { return typeof v === "number" && isFinite(v); }

  // Item value [x, y, xlo, xhi, ylo, yhi]: vertical and horizontal bars with caps.
  function errbar(params, api) {
    var color = api.visual("color"), cap = 4, w = 1.5, kids = [];
    var x = api.value(0), y = api.value(1);
    var xlo = api.value(2), xhi = api.value(3), ylo = api.value(4), yhi = api.value(5);
    if (num(ylo) && num(yhi) && ylo !== yhi) {
      var a = api.coord([x, ylo]), b = api.coord([x, yhi]);
      kids.push(seg(a, b, color, w),
        seg([a[0] - cap, a[1]], [a[0] + cap, a[1]], color, w),
        seg([b[0] - cap, b[1]], [b[0] + cap, b[1]], color, w));
    }
    if (num(xlo) && num(xhi) && xlo !== xhi) {
      var c = api.coord([xlo, y]), d = api.coord([xhi, y]);
      kids.push(seg(c, d, color, w),
        seg([c[0], c[1] - cap], [c[0], c[1] + cap], color, w),
        seg([d[0], d[1] - cap], [d[0], d[1] + cap], color, w));
    }
    return { type: "group", children: kids };
  }

  // Item value as for errbar; a plain connector from ylo to yhi.
  function span(params, api) {
    var x = api.value(0), ylo = api.value(4), yhi = api.value(5);
    if (!num(ylo) || !num(yhi)) { return null; }
    return seg(api.coord([x, ylo]), api.coord([x, yhi]), api.visual("color"), 2);
  }

  // The data is the closed outline of a band; the first item draws it whole.
  function band(points) {
    return function (params, api) {
      if (params.dataIndex !== 0 || points.length < 3) { return null; }
      var pts = [];
      for (var i = 0; i < points.length; i++) { pts.push(api.coord(points[i])); }
      return { type: "polygon", shape: { points: pts }, style: { fill: api.visual("color"), opacity: 0.3 } };
    };
  }

  function none() { return null; }

  function prepare(opt) {
    opt.textStyle = { fontFamily: FONT };
    opt.animation = false;
    // Long names wrap inside the chart instead of widening the page.
    opt.tooltip = opt.tooltip || {};
    opt.tooltip.confine = true;
    opt.tooltip.extraCssText = "max-width: 320px; white-space: normal; overflow-wrap: anywhere;";
    (opt.series || []).forEach(function (s) {
      if (s.type !== "custom") { return; }
      var kind = s.renderItem;
      s.silent = true;
      s.clip = true; // bands and bars stop at an axis cut short on purpose
      s.tooltip = { show: false };
      if (kind === "errbar") {
        s.renderItem = errbar;
      } else if (kind === "span") {
        s.renderItem = span;
      } else if (kind === "band") {
        s.renderItem = band((s.data || []).map(function (d) { return d.value; }));
      } else {
        s.renderItem = none;
      }
    });
    return opt;
  }

  // --- Large sites: long tables and the branch finder, a page at a time.
  // Every cell is set with textContent; nothing from the data becomes markup.

  var MAXNOWRAP = 24; // as maxNoWrap in report.go

  // cell fills td as the page template does: short cells on one line,
  // hyphenated words in longer ones kept whole.
  function cell(td, s) {
    var n = Array.from(s).length;
    if (n <= MAXNOWRAP && s.indexOf("; ") < 0) { td.className = "nw"; }
    var words = s.split(" ");
    for (var i = 0; i < words.length; i++) {
      if (i > 0) { td.appendChild(document.createTextNode(" ")); }
      var w = words[i];
      if (w.indexOf("-") >= 0 && Array.from(w).length <= MAXNOWRAP) {
        var sp = document.createElement("span");
        sp.className = "id";
        sp.textContent = w;
        td.appendChild(sp);
      } else {
        td.appendChild(document.createTextNode(w));
      }
    }
  }

  // column returns a function giving the text of row r of a stored column.
  function column(c, text) {
    if (c.k !== undefined) { return function () { return text[c.k]; }; }
    if (c.g) { return function (r) { return text[c.g[r]]; }; }
    if (c.d) { return function (r) { return c.d[c.i[r]]; }; }
    if (c.n) {
      var scale = Math.pow(10, c.f || 0);
      return function (r) { return c.n[r] === null ? "" : (c.p || "") + (c.n[r] / scale).toFixed(c.f || 0); };
    }
    var p = c.p || "", v = c.v || [];
    return function (r) { return p + v[r]; };
  }

  var NUM = /^\s*[-+]?(\d|\.\d)/;
  var collator = new Intl.Collator(undefined, { numeric: true, sensitivity: "base" });
  // compare orders numbers (with or without a unit after them) by value and
  // anything else as text, numbers first; empty cells last.
  function compare(a, b) {
    if (a === b) { return 0; }
    if (a === "" || a === "-" || a === "—") { return 1; }
    if (b === "" || b === "-" || b === "—") { return -1; }
    var na = NUM.test(a), nb = NUM.test(b);
    if (na && nb) {
      var d = parseFloat(a) - parseFloat(b);
      if (d !== 0) { return d; }
    } else if (na !== nb) {
      return na ? -1 : 1;
    }
    return collator.compare(a, b);
  }

  function button(label) {
    var b = document.createElement("button");
    b.type = "button";
    b.textContent = label;
    return b;
  }

  // Pager keeps the rows that match and the page shown, and draws it.
  function pager(total, page, draw, countEl, prev, next, noun) {
    var st = { rows: [], start: 0 };
    function show() {
      var n = st.rows.length;
      if (st.start >= n) { st.start = Math.max(0, n - page); }
      var end = Math.min(n, st.start + page);
      draw(st.rows.slice(st.start, end));
      countEl.textContent = n === 0 ? "no " + noun + " match" :
        noun + " " + (st.start + 1).toLocaleString("en") + " to " + end.toLocaleString("en") + " of " + n.toLocaleString("en") +
        (n < total ? " matching (" + total.toLocaleString("en") + " in all)" : "");
      prev.disabled = st.start === 0;
      next.disabled = end >= n;
    }
    prev.addEventListener("click", function () { st.start = Math.max(0, st.start - page); show(); });
    next.addEventListener("click", function () { st.start += page; show(); });
    return {
      set: function (rows) { st.rows = rows; st.start = 0; show(); },
      show: show
    };
  }

  // pagedTable turns a table whose first rows are in the page into one that
  // shows any page of the stored whole, with a search box and sorting.
  function pagedTable(wrap, t, text, page) {
    var cols = t.c.map(function (c) { return column(c, text); });
    var tbody = wrap.querySelector("tbody");
    var ths = wrap.querySelectorAll("thead th");
    var bar = document.createElement("div");
    bar.className = "pager";
    var label = document.createElement("label");
    label.textContent = "Search ";
    var q = document.createElement("input");
    q.type = "search";
    q.autocomplete = "off";
    label.appendChild(q);
    var count = document.createElement("span");
    var prev = button("previous"), next = button("next");
    bar.append(label, count, prev, next);
    wrap.parentNode.insertBefore(bar, wrap);
    var all = [];
    for (var r = 0; r < t.n; r++) { all.push(r); }
    var sortCol = -1, dir = 1;
    function draw(rows) {
      var frag = document.createDocumentFragment();
      rows.forEach(function (r) {
        var tr = document.createElement("tr");
        cols.forEach(function (f) {
          var td = document.createElement("td");
          cell(td, f(r));
          tr.appendChild(td);
        });
        for (var k = 0; k < (t.w || 0); k++) {
          var wi = document.createElement("td");
          wi.className = "wi";
          tr.appendChild(wi);
        }
        frag.appendChild(tr);
      });
      tbody.replaceChildren(frag);
    }
    var pg = pager(t.n, page, draw, count, prev, next, "rows");
    function update() {
      var needle = q.value.trim().toLowerCase();
      var rows = all;
      if (needle) {
        rows = all.filter(function (r) {
          for (var k = 0; k < cols.length; k++) {
            if (cols[k](r).toLowerCase().indexOf(needle) >= 0) { return true; }
          }
          return false;
        });
      }
      if (sortCol >= 0) {
        var f = cols[sortCol];
        rows = rows.slice().sort(function (a, b) { return dir * compare(f(a), f(b)) || a - b; });
      }
      pg.set(rows);
    }
    for (var k = 0; k < cols.length && k < ths.length; k++) {
      (function (k) {
        ths[k].setAttribute("data-sort", "");
        ths[k].title = "sort by this column (again to reverse)";
        ths[k].addEventListener("click", function () {
          dir = sortCol === k ? -dir : 1;
          sortCol = k;
          update();
        });
      })(k);
    }
    q.addEventListener("input", update);
    update();
  }

  // Charts that follow the finder's page, and how a drawn one joins them.
  var followers = [];
  var following = function () {};

  function fmt(v, digits) {
    return v === null || v === undefined ? "—" : String(Number(v.toFixed(digits)));
  }

  // finderTable is the branch finder: every branch, searched by name,
  // sorted by how far it is from design, or only the flagged ones.
  function finderTable(f, text, page) {
    var table = document.getElementById("fs-find");
    if (!table) { return; }
    var tbody = table.querySelector("tbody");
    var q = document.getElementById("fs-find-q");
    var sortBy = document.getElementById("fs-find-sort");
    var onlyFlagged = document.getElementById("fs-find-flagged");
    var n = f.id.length;
    var names = f.id.map(function (k) { return text[k]; });
    var lower = names.map(function (s) { return s.toLowerCase(); });
    var chartOf = {};
    f.charts.forEach(function (i, k) { chartOf[i] = "fs-branch-" + (k + 1); });
    function dev(v) { return v === null ? -1 : Math.abs(v - 100); }
    var keys = {
      worst: function (i) { return (text[f.fl[i]] ? 1e9 : 0) + Math.max(0, dev(f.f0[i])); },
      before: function (i) { return dev(f.f0[i]); },
      after: function (i) { return dev(f.f1[i]); },
      ratio: function (i) { return f.r[i] === null ? -1 : f.r[i]; }
    };
    var all = [];
    for (var i = 0; i < n; i++) { all.push(i); }
    function val(v) { return v === null ? "-" : v; }
    // fill redraws a following chart for rows, in the series order the
    // report's Go code gives each (flowChart, ratioChart).
    var fill = {
      flow: function (inst, rows) {
        var bars = [];
        rows.forEach(function (i, x) {
          if (f.f1[i] !== null && f.lo[i] !== null && f.hi[i] !== null) {
            bars.push({ name: names[i], value: [x, f.f1[i], x, x, f.lo[i], f.hi[i]] });
          }
        });
        inst.setOption({
          xAxis: [{ data: rows.map(function (i) { return names[i]; }) }],
          series: [
            { data: rows.map(function (i) { return { name: names[i], value: val(f.f0[i]) }; }) },
            { data: bars },
            { data: rows.map(function (i) { return { name: names[i], value: val(f.f1[i]) }; }) }
          ]
        });
      },
      ratio: function (inst, rows) {
        var bars = [];
        rows.forEach(function (i, x) {
          if (f.r[i] !== null && f.rl[i] !== null && f.rh[i] !== null) {
            bars.push({ name: names[i], value: [x, f.r[i], x, x, f.rl[i], f.rh[i]] });
          }
        });
        inst.setOption({
          xAxis: [{ data: rows.map(function (i) { return names[i]; }) }],
          series: [
            { data: bars },
            { data: rows.map(function (i) { return { name: names[i], value: text[f.fl[i]] ? "-" : val(f.r[i]) }; }) },
            { data: rows.map(function (i) { return { name: text[f.fl[i]] ? names[i] + ": " + text[f.fl[i]] : names[i], value: text[f.fl[i]] ? val(f.r[i]) : "-" }; }) }
          ]
        });
      }
    };
    var shown = [];
    function follow(rows) {
      shown = rows;
      followers.forEach(function (c) { fill[c.kind](c.inst, rows); });
    }
    following = function (inst, kind) {
      if (!fill[kind]) { return; }
      followers.push({ inst: inst, kind: kind });
      fill[kind](inst, shown);
    };
    function draw(rows) {
      var frag = document.createDocumentFragment();
      rows.forEach(function (i) {
        var tr = document.createElement("tr");
        var band = f.lo[i] === null || f.hi[i] === null ? "—" : fmt(f.lo[i], 1) + " to " + fmt(f.hi[i], 1);
        var ratio = fmt(f.r[i], 2) + (f.rl[i] === null || f.rh[i] === null ? "" : " (" + fmt(f.rl[i], 2) + " to " + fmt(f.rh[i], 2) + ")");
        var cells = [names[i], fmt(f.q[i], 3), fmt(f.f0[i], 1), fmt(f.f1[i], 1), band, ratio,
          text[f.sn[i]] || "—", text[f.sp[i]] || "—", text[f.fl[i]] || ""];
        cells.forEach(function (s) {
          var td = document.createElement("td");
          cell(td, s);
          tr.appendChild(td);
        });
        var td = document.createElement("td");
        if (chartOf[i]) {
          var go = button("show");
          go.setAttribute("data-chart", chartOf[i]);
          td.appendChild(go);
        }
        tr.appendChild(td);
        frag.appendChild(tr);
      });
      tbody.replaceChildren(frag);
    }
    var pg = pager(n, page, function (rows) { draw(rows); follow(rows); }, document.getElementById("fs-find-count"),
      document.getElementById("fs-find-prev"), document.getElementById("fs-find-next"), "branches");
    function update() {
      var needle = q.value.trim().toLowerCase();
      var flaggedOnly = onlyFlagged.checked;
      var rows = all.filter(function (i) {
        return (!flaggedOnly || text[f.fl[i]]) && (!needle || lower[i].indexOf(needle) >= 0);
      });
      var by = sortBy.value;
      if (by === "name") {
        rows.sort(function (a, b) { return collator.compare(names[a], names[b]) || a - b; });
      } else if (keys[by]) {
        var key = keys[by];
        var v = new Float64Array(n);
        rows.forEach(function (i) { v[i] = key(i); });
        rows.sort(function (a, b) { return v[b] - v[a] || a - b; });
      }
      pg.set(rows);
    }
    tbody.addEventListener("click", function (e) {
      var id = e.target.getAttribute && e.target.getAttribute("data-chart");
      var el = id && document.getElementById(id);
      if (el) { el.scrollIntoView(); }
    });
    q.addEventListener("input", update);
    sortBy.addEventListener("change", update);
    onlyFlagged.addEventListener("change", update);
    update();
  }

  var node = document.getElementById("fs-data");
  var data = JSON.parse(node.textContent);
  var text = data.text || [];
  if (data.finder) { finderTable(data.finder, text, data.page); }
  document.querySelectorAll("[data-table]").forEach(function (wrap) {
    var t = (data.tables || [])[Number(wrap.getAttribute("data-table"))];
    if (t) { pagedTable(wrap, t, text, t.s); }
  });
  // The charts are drawn a few at a time, so that a large site's page
  // answers at once and its charts follow; printing draws any left first.
  var pending = data.charts.slice();
  function draw(c) {
    var el = document.getElementById(c.id);
    if (!el) { return; }
    var inst = echarts.init(el, null, { renderer: "canvas" });
    inst.setOption(prepare(c.option));
    if (c.follow) { following(inst, c.follow); }
  }
  function drawSome() {
    var until = performance.now() + 50;
    while (pending.length > 0 && performance.now() < until) { draw(pending.shift()); }
    if (pending.length > 0) { setTimeout(drawSome, 0); }
  }
  window.addEventListener("beforeprint", function () {
    while (pending.length > 0) { draw(pending.shift()); }
  });
  drawSome();
})();
