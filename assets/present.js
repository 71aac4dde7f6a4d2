/* Keyboard for presentation mode: arrows and Page keys step through saved views,
 * F toggles full screen. Active only while the page is presenting, and never while
 * typing in a field. */
(function () {
    "use strict";
    var NEXT = ["ArrowRight", "PageDown", " "];
    var PREVIOUS = ["ArrowLeft", "PageUp"];

    function presenting() {
        var root = document.getElementById("app-root");
        return root && root.classList.contains("is-presenting");
    }

    function typing(target) {
        var tag = target && target.tagName;
        return tag === "INPUT" || tag === "TEXTAREA" || tag === "SELECT" || (target && target.isContentEditable);
    }

    function press(id) {
        var button = document.getElementById(id);
        if (button) { button.click(); }
    }

    document.addEventListener("keydown", function (event) {
        if (!presenting() || typing(event.target) || event.altKey || event.ctrlKey || event.metaKey) {
            return;
        }
        if (NEXT.indexOf(event.key) >= 0) {
            event.preventDefault();
            press("slide-next");
        } else if (PREVIOUS.indexOf(event.key) >= 0) {
            event.preventDefault();
            press("slide-prev");
        } else if (event.key === "f" || event.key === "F") {
            press("full-screen");
        }
    });
}());
