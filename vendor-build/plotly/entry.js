// The plotting library of the dashboard and its report: plotly.js's core,
// which holds the scatter trace (lines, markers, error bars, log axes, colour
// bars, legends, hover, image export), and the heatmap trace. Nothing else
// is registered, so a figure of another trace type draws nothing.
var Plotly = require("plotly.js/lib/core");

Plotly.register([require("plotly.js/lib/heatmap")]);

module.exports = Plotly;
