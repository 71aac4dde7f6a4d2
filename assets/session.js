/* When the team access key's session has ended (the server answers 401 to the
 * dashboard's own requests), go to the sign-in page and come back here after,
 * instead of leaving a page whose controls silently stop working. */
(function () {
    "use strict";
    if (!window.fetch) {
        return;
    }
    var originalFetch = window.fetch.bind(window);
    var leaving = false;
    window.fetch = function (resource, options) {
        return originalFetch(resource, options).then(function (response) {
            var url = typeof resource === "string" ? resource : (resource && resource.url) || "";
            if (response.status === 401 && url.indexOf("_dash-") >= 0 && !leaving) {
                leaving = true;
                var here = window.location.pathname + window.location.search;
                window.location.assign("/sign-in?next=" + encodeURIComponent(here));
            }
            return response;
        });
    };
}());
