(function () {
  var data = JSON.parse(document.getElementById('report-data').textContent);
  var layout = function (title, xt, yt, extra) {
    var l = { title: { text: title }, margin: { l: 70, r: 20, t: 40, b: 55 },
      xaxis: { title: { text: xt } }, yaxis: { title: { text: yt } }, font: { size: 14 } };
    for (var k in extra) { l[k] = extra[k]; }
    return l;
  };
  var still = { staticPlot: true };
  var byId = {};
  data.datasets.forEach(function (d) { byId[d.id] = d; });
  // Log colour scale: log10 C, floored four decades below the largest value
  // so that the spreading front, not only the source, is visible.
  var logMap = function (d) {
    var top = 0;
    d.C.forEach(function (row) { row.forEach(function (v) { if (v !== null && v > top) { top = v; } }); });
    var floor = top > 0 ? top * 1e-4 : 1e-12;
    return d.C.map(function (row) {
      return row.map(function (v) { return v === null ? null : Math.log10(Math.max(v, floor)); });
    });
  };
  data.datasets.forEach(function (d) {
    Plotly.newPlot('map-' + d.id, [{ type: 'heatmap', x: d.x, y: d.t, z: logMap(d),
      colorscale: 'Viridis', colorbar: { title: { text: 'log₁₀ C' } } }],
      layout('Space-time map (log colour scale)', 'x (sites)', 't (' + d.time_unit + ')', {}), still);
    if (d.auto) {
      Plotly.newPlot('auto-' + d.id, [{ x: d.auto.t, y: d.auto.C, mode: 'markers',
        error_y: { type: 'data', array: d.auto.err, visible: d.auto.err !== null } }],
        layout('Autocorrelation C(0,t)', 't (' + d.time_unit + ')', 'C(0,t)',
          { xaxis: { type: 'log', title: { text: 't (' + d.time_unit + ')' } }, yaxis: { type: 'log', title: { text: 'C(0,t)' } } }),
        still);
    }
    Plotly.newPlot('sum-' + d.id, [{ x: d.sum.t, y: d.sum.sum, mode: 'markers',
      error_y: { type: 'data', array: d.sum.err, visible: d.sum.err !== null } }],
      layout('Sum rule', 't (' + d.time_unit + ')', 'Σx C(x,t)', { shapes: [{ type: 'line', xref: 'paper', x0: 0, x1: 1,
        y0: 1, y1: 1, line: { dash: 'dot' } }] }), still);
  });
  // Up to `n` indices spread evenly over 0..len-1.
  var spread = function (len, n) {
    var out = [];
    if (len <= n) { for (var i = 0; i < len; i++) { out.push(i); } return out; }
    for (var k = 0; k < n; k++) { out.push(Math.round(k * (len - 1) / (n - 1))); }
    return out;
  };
  var inWindow = function (w, t) {
    return t > 0 && (w.t_min === null || w.t_min === undefined || t >= w.t_min) &&
      (w.t_max === null || w.t_max === undefined || t <= w.t_max);
  };
  data.fits.forEach(function (f) {
    var d = byId[f.dataset];
    if (!d) { return; }
    var w = f.windows || {};
    if (f.z !== null) {
      // Scaling collapse at the pinned z: t^{1/z} C against x / t^{1/z}.
      var times = [];
      d.t.forEach(function (t, i) { if (inWindow(w, t)) { times.push(i); } });
      var traces = spread(times.length, 8).map(function (k) {
        var i = times[k], t = d.t[i], s = Math.pow(t, 1 / f.z), xs = [], ys = [];
        d.x.forEach(function (x, j) {
          var c = d.C[i][j];
          if (c === null || (w.x_max !== null && w.x_max !== undefined && Math.abs(x) > w.x_max)) { return; }
          xs.push(x / s); ys.push(c * s);
        });
        return { x: xs, y: ys, mode: 'lines+markers', marker: { size: 4 }, name: 't = ' + t };
      });
      Plotly.newPlot('fit-collapse-' + f.entry, traces,
        layout('Collapse at z = ' + f.z.toPrecision(4), 'x / t^{1/z}', 't^{1/z} C(x,t)', {}), still);
    }
    if (f.tail && d.auto) {
      Plotly.newPlot('fit-tail-' + f.entry, [
        { x: d.auto.t, y: d.auto.C, mode: 'markers', name: 'data' },
        { x: f.tail.t, y: f.tail.C, mode: 'lines', name: 'fit', line: { width: 3, color: '#a3195b' } }],
        layout('C(0,t) and the fitted power law', 't (' + d.time_unit + ')', 'C(0,t)',
          { xaxis: { type: 'log', title: { text: 't (' + d.time_unit + ')' } }, yaxis: { type: 'log', title: { text: 'C(0,t)' } } }),
        still);
    }
    if (f.profile) {
      var p = f.profile, out = [];
      spread(p.t.length, 4).forEach(function (ti, n) {
        var di = d.t.indexOf(p.t[ti]);
        var colour = ['#1b4f8a', '#2a8a5b', '#b0601a', '#6b2a8a'][n % 4];
        if (di >= 0) {
          out.push({ x: d.x, y: d.C[di], mode: 'markers', marker: { color: colour, size: 5 }, name: 'data t = ' + p.t[ti] });
        }
        out.push({ x: p.x, y: p.C[ti], mode: 'lines', line: { color: colour, width: 2 }, name: 'fit t = ' + p.t[ti] });
      });
      Plotly.newPlot('fit-profile-' + f.entry, out,
        layout('Profiles and the fitted model', 'x (sites)', 'C(x,t)', {}), still);
    }
  });
  var rows = data.comparison.filter(function (r) { return !r.retracted && r.z !== null && r.alpha !== null; });
  if (rows.length > 0) {
    var a = [], line = [];
    for (var i = 0; i <= 60; i++) { var al = 0.5 + i * 0.025; a.push(al); line.push(Math.min(2 * al - 1, 2)); }
    Plotly.newPlot('compare', [
      { x: rows.map(function (r) { return r.alpha; }), y: rows.map(function (r) { return r.z; }),
        error_y: { type: 'data', array: rows.map(function (r) { return r.z_err || 0; }) },
        mode: 'markers', name: 'pinned z' },
      { x: a, y: line, mode: 'lines', name: 'z = min(2α − 1, 2)' }],
      layout('Pinned z versus nominal α', 'α', 'z', {}), still);
  }
})();
