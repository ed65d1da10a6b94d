/* The trustees' site: draws the charts with the bundled vega-embed and makes tables
   sortable with real buttons (keyboard operable). Fetches nothing. */
(function () {
  "use strict";

  function drawCharts() {
    var boxes = document.querySelectorAll("[data-spec]");
    Array.prototype.forEach.call(boxes, function (box) {
      var spec = JSON.parse(document.getElementById(box.getAttribute("data-spec")).textContent);
      // ast: Vega's expressions evaluated by its interpreter, not compiled to functions,
      // so the page's policy need not allow eval
      window.vegaEmbed(box, spec, {
        renderer: "svg", actions: false, tooltip: { theme: "custom" }, ast: true
      }).then(function () {
        var svg = box.querySelector("svg");
        if (svg) {
          svg.setAttribute("aria-hidden", "true");
          svg.setAttribute("focusable", "false");
        }
        box.setAttribute("data-rendered", "true");
      }).catch(function (err) {
        box.setAttribute("data-failed", "true");
        box.textContent = "The chart could not be drawn (" + err.message +
          "); its data are in the table on this page.";
        console.error(err);
      });
    });
  }

  function cellValue(row, index, numeric) {
    var cell = row.cells[index];
    var raw = cell.hasAttribute("data-value") ? cell.getAttribute("data-value")
                                              : cell.textContent.trim();
    if (!numeric) { return raw.toLowerCase(); }
    if (raw === "") { return null; }
    var x = parseFloat(raw);
    return isNaN(x) ? null : x;
  }

  function makeSortable(table, n) {
    var heads = table.tHead ? table.tHead.rows[0].cells : [];
    var live = document.createElement("p");
    live.className = "visually-hidden";
    live.setAttribute("aria-live", "polite");
    table.parentNode.insertBefore(live, table.nextSibling);
    var body = table.tBodies[0];
    Array.prototype.forEach.call(body.rows, function (row, i) { row.setAttribute("data-order", i); });
    Array.prototype.forEach.call(heads, function (th, index) {
      var label = th.textContent.trim();
      var numeric = th.getAttribute("data-type") === "number";
      var button = document.createElement("button");
      button.type = "button";
      button.className = "sort";
      button.innerHTML = "";
      var text = document.createElement("span");
      text.textContent = label;
      var arrow = document.createElement("span");
      arrow.className = "arrow";
      arrow.setAttribute("aria-hidden", "true");
      button.appendChild(text);
      button.appendChild(arrow);
      th.textContent = "";
      th.appendChild(button);
      button.addEventListener("click", function () {
        var descending = th.getAttribute("aria-sort") === "ascending";
        var rows = Array.prototype.slice.call(body.rows);
        rows.sort(function (a, b) {
          var x = cellValue(a, index, numeric), y = cellValue(b, index, numeric);
          if (x === null && y === null) { return a.getAttribute("data-order") - b.getAttribute("data-order"); }
          if (x === null) { return 1; }
          if (y === null) { return -1; }
          var c = x < y ? -1 : (x > y ? 1 : 0);
          if (descending) { c = -c; }
          return c !== 0 ? c : a.getAttribute("data-order") - b.getAttribute("data-order");
        });
        rows.forEach(function (row) { body.appendChild(row); });
        Array.prototype.forEach.call(heads, function (other) {
          other.removeAttribute("aria-sort");
          var a = other.querySelector(".arrow");
          if (a) { a.textContent = ""; }
        });
        th.setAttribute("aria-sort", descending ? "descending" : "ascending");
        arrow.textContent = descending ? "\u25BC" : "\u25B2";
        live.textContent = "Sorted by " + label + ", " + (descending ? "descending" : "ascending") + ".";
      });
    });
  }

  function openDetailsForPrint() {
    Array.prototype.forEach.call(document.querySelectorAll("details"), function (d) {
      d.setAttribute("open", "");
    });
  }

  Array.prototype.forEach.call(document.querySelectorAll("table.sortable"), makeSortable);
  window.addEventListener("beforeprint", openDetailsForPrint);
  if (window.vegaEmbed) { drawCharts(); }
}());
