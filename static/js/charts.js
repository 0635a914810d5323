// Draws each element carrying ECharts options as JSON in data-chart, including the ones
// htmx swaps in later. The options are built on the server (server/pages/charts.py).
(function () {
  "use strict";

  var ROW_HEIGHT_PX = 44;
  var FRAME_HEIGHT_PX = 110;

  function draw(root) {
    if (typeof echarts === "undefined") return;
    root.querySelectorAll("[data-chart]").forEach(function (el) {
      if (echarts.getInstanceByDom(el)) return;
      var options;
      try {
        options = JSON.parse(el.getAttribute("data-chart"));
      } catch (err) {
        return;
      }
      var rows = parseInt(el.getAttribute("data-chart-rows") || "0", 10);
      if (rows > 0) el.style.height = FRAME_HEIGHT_PX + rows * ROW_HEIGHT_PX + "px";
      echarts.init(el).setOption(options);
    });
  }

  document.addEventListener("DOMContentLoaded", function () {
    draw(document);
  });

  document.addEventListener("htmx:afterSettle", function () {
    draw(document);
  });

  // Free a chart whose element htmx is about to remove.
  document.addEventListener("htmx:beforeCleanupElement", function (event) {
    if (typeof echarts === "undefined") return;
    var chart = echarts.getInstanceByDom(event.target);
    if (chart) chart.dispose();
  });

  var resizeTimer = null;
  window.addEventListener("resize", function () {
    clearTimeout(resizeTimer);
    resizeTimer = setTimeout(function () {
      if (typeof echarts === "undefined") return;
      document.querySelectorAll("[data-chart]").forEach(function (el) {
        var chart = echarts.getInstanceByDom(el);
        if (chart) chart.resize();
      });
    }, 150);
  });
})();
