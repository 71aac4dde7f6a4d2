/* After a sample is picked (a click on a plot or on a flagged sample's name), bring its
 * contributions into view when they are off screen, so the click visibly leads somewhere.
 * Only for picks made on this page: opening a link that already names a sample does not
 * scroll, and neither does a slide. */
(function () {
    "use strict";

    function currentPick() {
        return new URLSearchParams(window.location.search).get("pick") || "";
    }

    var shownPick = currentPick();  // a link that arrives with a pick is not a click

    function offScreen(element) {
        var box = element.getBoundingClientRect();
        return box.top > window.innerHeight - 80 || box.bottom < 0;
    }

    function check() {
        var panel = document.getElementById("contributions");
        if (!panel || !panel.textContent.trim()) { return; }
        var pick = currentPick();
        var root = document.getElementById("app-root");
        if (pick && pick !== shownPick && !(root && root.classList.contains("is-presenting")) && offScreen(panel)) {
            panel.scrollIntoView({behavior: "smooth", block: "start"});
        }
        shownPick = pick;
    }

    new MutationObserver(function () { window.requestAnimationFrame(check); })
        .observe(document.body, {childList: true, subtree: true});
}());
