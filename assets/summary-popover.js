/*
 * "About this data" is a <details> element shown as a popover over the page.
 * A popover closes when the user clicks anywhere outside it or presses Escape,
 * as people expect; the browser alone keeps a <details> open until its summary
 * is clicked again, leaving it over the axis controls.
 */
(function () {
    "use strict";
    var SELECTOR = "details.dataset-summary";

    function openPopovers() {
        return Array.prototype.slice.call(document.querySelectorAll(SELECTOR + "[open]"));
    }

    document.addEventListener("click", function (event) {
        openPopovers().forEach(function (details) {
            if (!details.contains(event.target)) {
                details.open = false;
            }
        });
    }, true);

    document.addEventListener("keydown", function (event) {
        if (event.key !== "Escape") {
            return;
        }
        openPopovers().forEach(function (details) {
            var summary = details.querySelector("summary");
            var hadFocus = details.contains(document.activeElement);
            details.open = false;
            if (hadFocus && summary) {
                summary.focus();
            }
        });
    });
}());
