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

    /* Slides: give the figure's graphs all the height left under the bars and the note band,
     * so nothing scrolls at any screen size; back to the stylesheet's heights after presenting. */
    var BOTTOM_GAP = 14;
    var sized = [];

    function slideGraphs() {
        var cards = document.querySelectorAll(".is-presenting .cards > .card:not(.saved-banner)");
        for (var i = 0; i < cards.length; i += 1) {
            if (cards[i].offsetParent !== null) {
                return cards[i].querySelectorAll(".scores-graph, .variance-graph, .diagnostics-graph, .loadings-graph, .circle-graph");
            }
        }
        return [];
    }

    function fitSlide() {
        if (!presenting()) {
            sized.forEach(function (graph) { graph.style.height = ""; });
            sized = [];
            return;
        }
        var graphs = Array.prototype.slice.call(slideGraphs());
        sized.forEach(function (graph) {
            if (graphs.indexOf(graph) < 0) { graph.style.height = ""; }  // the previous slide's figure
        });
        sized = graphs;
        graphs.forEach(function (graph) {
            var card = graph.closest(".card");
            var box = graph.getBoundingClientRect();
            var below = Math.max(card.getBoundingClientRect().bottom - box.bottom, 0);
            var height = Math.max(Math.floor(window.innerHeight - box.top - below - BOTTOM_GAP), 200);
            // Only a real change: setting the same height again would redraw the plot for nothing.
            if (Math.abs(box.height - height) > 1) { graph.style.height = height + "px"; }
        });
    }

    var pending = false;
    function scheduleFit() {
        if (pending) { return; }
        pending = true;
        window.requestAnimationFrame(function () { pending = false; fitSlide(); });
    }

    window.addEventListener("resize", scheduleFit);
    document.addEventListener("fullscreenchange", scheduleFit);
    // The page is drawn by Dash after load, and each slide changes the band's height and the figure:
    // refit after any change to the page (at most once a frame; a fit that changes nothing stops there).
    new MutationObserver(scheduleFit).observe(document.body, {
        attributes: true, attributeFilter: ["class", "hidden", "style"], childList: true, subtree: true,
    });
}());
