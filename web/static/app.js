// Dashboard behaviour: draw the charts from their JSON data blocks, sort tables, toggle the
// bank fields of the scenario form. No inline scripts anywhere (the CSP forbids them).
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

  document.addEventListener("DOMContentLoaded", function () {
    drawCharts(); sortTables(); bankFields(); busyForms(); confirmForms(); autoSubmit();
  });
})();
