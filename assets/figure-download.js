/* "SVG" buttons: download the neighbouring plot as a vector image, in the browser
 * (no server-side image engine). PNG comes from each plot's own toolbar camera. */
(function () {
    "use strict";
    document.addEventListener("click", function (event) {
        var button = event.target.closest ? event.target.closest("[data-svg-graph]") : null;
        if (!button || !window.Plotly) {
            return;
        }
        var graphs = button.getAttribute("data-svg-graph").split(" ");
        graphs.forEach(function (id) {
            var plot = document.querySelector("#" + id + " .js-plotly-plot");
            if (plot) {
                window.Plotly.downloadImage(plot, {format: "svg", filename: "ordinate-" + id});
            }
        });
    });
}());
