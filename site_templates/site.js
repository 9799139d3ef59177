/* Draw every chart on the page from the JSON spec embedded beside it.
   The specs are Vega-Lite; the libraries come from assets/vega-bundle.js. */
(function () {
  "use strict";
  var holders = document.querySelectorAll("[data-chart]");
  Array.prototype.forEach.call(holders, function (el) {
    var source = document.getElementById(el.getAttribute("data-chart"));
    if (!source || typeof vegaEmbed !== "function") {
      el.textContent = "The chart could not be drawn: the local chart library did not load.";
      el.setAttribute("data-rendered", "failed");
      return;
    }
    var spec = JSON.parse(source.textContent);
    vegaEmbed(el, spec, { renderer: "svg", actions: false, tooltip: true })
      .then(function () { el.setAttribute("data-rendered", "yes"); })
      .catch(function (err) {
        el.textContent = "The chart could not be drawn: " + err;
        el.setAttribute("data-rendered", "failed");
      });
  });
})();

/* Printed pages show every data table. */
window.addEventListener("beforeprint", function () {
  Array.prototype.forEach.call(document.querySelectorAll("details.data"), function (d) {
    d.setAttribute("open", "");
  });
});
