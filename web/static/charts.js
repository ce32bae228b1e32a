// charts.js starts every control chart on a page. The chart options are
// built on the server and carried in a <script type="application/json">
// block next to each chart element, so that the page needs no inline
// script and the Content-Security-Policy can forbid them.
(function () {
  'use strict';
  function start() {
    var nodes = document.querySelectorAll('[data-chart-options]');
    for (var i = 0; i < nodes.length; i++) {
      var el = nodes[i];
      var src = document.getElementById(el.getAttribute('data-chart-options'));
      if (!src) {
        continue;
      }
      var options;
      try {
        options = JSON.parse(src.textContent);
      } catch (e) {
        el.textContent = 'The chart data could not be read.';
        continue;
      }
      var chart = echarts.init(el, null, { renderer: 'canvas' });
      chart.setOption(options);
      window.addEventListener('resize', chart.resize.bind(chart));
    }
  }
  if (document.readyState === 'loading') {
    document.addEventListener('DOMContentLoaded', start);
  } else {
    start();
  }
})();
