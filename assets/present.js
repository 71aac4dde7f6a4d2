/* Keyboard for presentation mode: arrows and Page keys step through saved views,
 * Home and End jump to the first and last, F toggles full screen (Esc leaves it, as
 * browsers do). Active only while the page is presenting, never while typing in a
 * field; an attendee's page that follows the presenter only takes F. */
(function () {
    "use strict";
    var NEXT = ["ArrowRight", "PageDown", " "];
    var PREVIOUS = ["ArrowLeft", "PageUp"];

    var JUMPS = {Home: "slide-first", End: "slide-last"};

    function hasClass(name) {
        var root = document.getElementById("app-root");
        return root && root.classList.contains(name);
    }

    function presenting() {
        return hasClass("is-presenting");
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
        if (event.key === "f" || event.key === "F") {
            press("full-screen");
            return;
        }
        if (hasClass("is-following")) {
            return;
        }
        if (JUMPS[event.key]) {
            event.preventDefault();
            press(JUMPS[event.key]);
        } else if (NEXT.indexOf(event.key) >= 0) {
            event.preventDefault();
            press("slide-next");
        } else if (PREVIOUS.indexOf(event.key) >= 0) {
            event.preventDefault();
            press("slide-prev");
        }
    });
}());
