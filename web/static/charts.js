// charts.js starts every control chart on a page. The chart options are
// built on the server and carried in a <script type="application/json">
// block next to each chart element, so that the page needs no inline
// script and the Content-Security-Policy can forbid them. A second block
// (data-chart-details) holds the tooltip lines of each point, written in
// plain words on the server; they are shown as text, never as markup.
(function () {
  'use strict';
  function escapeText(s) {
    return String(s).replace(/&/g, '&amp;').replace(/</g, '&lt;').replace(/>/g, '&gt;')
      .replace(/"/g, '&quot;').replace(/'/g, '&#39;');
  }
  function readJSON(id) {
    var src = id && document.getElementById(id);
    if (!src) { return null; }
    return JSON.parse(src.textContent);
  }
  function start() {
    var nodes = document.querySelectorAll('[data-chart-options]');
    for (var i = 0; i < nodes.length; i++) {
      var el = nodes[i];
      var options, details;
      try {
        options = readJSON(el.getAttribute('data-chart-options'));
        details = readJSON(el.getAttribute('data-chart-details'));
      } catch (e) {
        el.textContent = 'The chart data could not be read.';
        continue;
      }
      if (!options) { continue; }
      if (details) {
        options.tooltip = options.tooltip || {};
        options.tooltip.trigger = 'axis';
        options.tooltip.formatter = (function (d) {
          return function (params) {
            var p = Array.isArray(params) ? params[0] : params;
            var lines = p && d[p.dataIndex];
            if (!lines) { return ''; }
            return lines.map(escapeText).join('<br>');
          };
        })(details);
      }
      var chart = echarts.init(el, null, { renderer: 'canvas' });
      chart.setOption(options);
      el.setAttribute('data-chart-ready', 'true');
      window.addEventListener('resize', chart.resize.bind(chart));
      window.addEventListener('beforeprint', chart.resize.bind(chart));
    }
  }
  if (document.readyState === 'loading') {
    document.addEventListener('DOMContentLoaded', start);
  } else {
    start();
  }
})();
