// Dashboard behaviour: draw the charts from their JSON data blocks, sort tables, toggle the
// bank fields of the scenario form, fit the charts to the paper when printing. No inline
// scripts anywhere (the CSP forbids them).
(function () {
  "use strict";

  function drawCharts() {
    if (typeof Plotly === "undefined") { return; }
    document.querySelectorAll("[data-figure]").forEach(function (el) {
      var src = document.getElementById(el.getAttribute("data-figure"));
      if (!src) { return; }
      var fig = JSON.parse(src.textContent);
      Plotly.newPlot(el, fig.data, fig.layout, {responsive: true, displaylogo: false,
        modeBarButtonsToRemove: ["lasso2d", "select2d"]}).then(function () {
        el.setAttribute("data-drawn", "1");
      });
    });
  }

  function cellValue(row, i) {
    var c = row.children[i];
    if (!c) { return ""; }
    return c.hasAttribute("data-value") ? c.getAttribute("data-value") : c.textContent.trim();
  }

  function sortTables() {
    document.querySelectorAll("table.sortable").forEach(function (table) {
      var heads = table.querySelectorAll("th[data-sort]");
      heads.forEach(function (th) {
        th.setAttribute("tabindex", "0");
        function go() {
          var i = Array.prototype.indexOf.call(th.parentNode.children, th);
          var numeric = th.getAttribute("data-sort") === "num";
          var asc = !th.classList.contains("asc");
          heads.forEach(function (h) { h.classList.remove("asc", "desc"); });
          th.classList.add(asc ? "asc" : "desc");
          var body = table.tBodies[0];
          var rows = Array.prototype.slice.call(body.rows);
          rows.sort(function (a, b) {
            var x = cellValue(a, i), y = cellValue(b, i);
            if (numeric) {
              // rows without a value go last whatever the direction
              if (x === "" && y === "") { return 0; }
              if (x === "") { return 1; }
              if (y === "") { return -1; }
              return asc ? parseFloat(x) - parseFloat(y) : parseFloat(y) - parseFloat(x);
            }
            return asc ? x.localeCompare(y) : y.localeCompare(x);
          });
          rows.forEach(function (r) { body.appendChild(r); });
        }
        th.addEventListener("click", go);
        th.addEventListener("keydown", function (e) { if (e.key === "Enter") { go(); } });
      });
    });
  }

  function bankFields() {
    var radios = document.querySelectorAll("input[name=design]");
    if (!radios.length) { return; }
    function update() {
      var v = document.querySelector("input[name=design]:checked");
      v = v ? v.value : "optimise";
      document.querySelectorAll("[data-design]").forEach(function (el) {
        el.style.display = el.getAttribute("data-design").split(" ").indexOf(v) >= 0 ? "" : "none";
      });
    }
    radios.forEach(function (r) { r.addEventListener("change", update); });
    update();
  }

  function busyForms() {
    document.querySelectorAll("form[data-busy]").forEach(function (f) {
      f.addEventListener("submit", function () {
        var b = f.querySelector("button[type=submit]");
        if (b) { b.textContent = f.getAttribute("data-busy"); b.disabled = true; }
      });
    });
  }

  function confirmForms() {
    document.querySelectorAll("form[data-confirm]").forEach(function (f) {
      f.addEventListener("submit", function (e) {
        if (!window.confirm(f.getAttribute("data-confirm"))) { e.preventDefault(); }
      });
    });
  }

  function autoSubmit() {
    document.querySelectorAll("select[data-autosubmit]").forEach(function (s) {
      s.addEventListener("change", function () { s.form.submit(); });
    });
  }

  // On paper a chart drawn for the screen would run past the page: before printing, each is
  // redrawn at most as wide as the printable width of an A4 page (186 mm ≈ 700 px), and
  // redrawn for the screen afterwards.
  var PRINT_WIDTH = 680;
  function chartsForPrint(printing) {
    if (typeof Plotly === "undefined") { return; }
    document.querySelectorAll("[data-figure][data-drawn]").forEach(function (el) {
      if (printing) {
        Plotly.relayout(el, {width: Math.min(el.clientWidth || PRINT_WIDTH, PRINT_WIDTH)});
      } else {
        Plotly.relayout(el, {width: null, autosize: true});
      }
    });
  }

  function printHooks() {
    window.addEventListener("beforeprint", function () { chartsForPrint(true); });
    window.addEventListener("afterprint", function () { chartsForPrint(false); });
    if (window.matchMedia) {
      var mq = window.matchMedia("print");
      var onChange = function (e) { chartsForPrint(e.matches); };
      if (mq.addEventListener) { mq.addEventListener("change", onChange); } else if (mq.addListener) { mq.addListener(onChange); }
    }
  }

  document.addEventListener("DOMContentLoaded", function () {
    drawCharts(); sortTables(); bankFields(); busyForms(); confirmForms(); autoSubmit(); printHooks();
  });
})();
