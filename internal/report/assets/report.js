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

  var node = document.getElementById("fs-data");
  var data = JSON.parse(node.textContent);
  data.charts.forEach(function (c) {
    var el = document.getElementById(c.id);
    if (!el) { return; }
    var inst = echarts.init(el, null, { renderer: "canvas" });
    inst.setOption(prepare(c.option));
  });
})();
