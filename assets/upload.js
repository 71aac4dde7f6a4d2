/*
 * Ordinate: send a data file to the server once, streamed, with progress.
 *
 * Why not dcc.Upload: it keeps the file base64-encoded in the page and sends it
 * again with every callback that reads it, which freezes or crashes the tab for
 * large files, and its max_size fails silently. Here the browser streams the
 * file from disk in one POST to the server (see webapp/upload.py), which
 * answers with a token and a summary; those go to the Dash store
 * "upload-result" through window.dash_clientside.set_props.
 *
 * Markup the layout renders (ids and attributes are the contract):
 *
 *   <div id="upload-zone" role="button" tabindex="0"        (or a <label>)
 *        data-limit-mb="50"                 size limit in MB (1 MB = 1024*1024 bytes)
 *        data-upload-url="/api/upload"      optional; default "/api/upload"
 *        data-received-note="...">          optional; said after "Received “file”" (default: where to manage it)
 *     ...instructions text...
 *   </div>
 *
 *   The file input is created by THIS SCRIPT inside the zone, because Dash's
 *   component libraries have no <input type="file"> (dcc.Input has no "file"
 *   type and dash.html has no Input):
 *     <input id="upload-input" type="file" tabindex="-1"
 *            accept=".csv,.tsv,.txt,text/csv,text/tab-separated-values">
 *   It is visually hidden with inline styles but NOT display:none, so browser
 *   tests can wait for "#upload-input" and send_keys a path to it. It is put
 *   back whenever Dash re-renders the zone. If the page already has an
 *   element with that id, it is used as is.
 *   <progress id="upload-progress" max="100" hidden></progress>
 *            the chosen progress element: a native <progress>. This script sets
 *            its value (0-100), removes the value while the server reads the
 *            file (indeterminate bar) and toggles its `hidden` property.
 *   <div id="upload-status" aria-live="polite"></div>
 *            render it EMPTY and never give it children from a callback: this
 *            script owns its text.
 *   dcc.Store(id="upload-result")
 *            receives {data: {token, summary, purpose, at}} or {data: {error, at}}.
 *   <button id="batch-button">   optional: opens the same file chooser, and the
 *            file is published with purpose "batch" (a new batch to score
 *            against the open view's model) instead of "analysis".
 *
 * Classes this script sets (style them in CSS):
 *   #upload-zone.is-dragging    a file is being dragged over the zone
 *   #upload-zone.is-uploading   an upload is in progress (also aria-busy="true")
 *   #upload-status.is-error     the status line shows an error
 *
 * The listeners are delegated on `document` because Dash renders the layout
 * after this script has run (and may re-render it).
 *
 * Plain ES2017, no libraries, no build step.
 */
(function () {
    "use strict";

    var ZONE_ID = "upload-zone";
    var INPUT_ID = "upload-input";
    var PROGRESS_ID = "upload-progress";
    var STATUS_ID = "upload-status";
    var RESULT_ID = "upload-result";
    var BATCH_BUTTON_ID = "batch-button";
    var DEFAULT_URL = "/api/upload";
    var BYTES_PER_MB = 1024 * 1024;
    var NOTE_MS = 6000;
    var SUCCESS_MS = 15000;
    var POINTER_MS = 8000;
    var ACCEPT = ".csv,.tsv,.txt,text/csv,text/tab-separated-values";
    // The usual "visually hidden" pattern: invisible, yet present and usable.
    var HIDDEN_STYLE = "position:absolute;width:1px;height:1px;padding:0;margin:-1px;" +
        "overflow:hidden;clip:rect(0,0,0,0);white-space:nowrap;border:0;opacity:0;";

    var busy = false;
    var nextPurpose = "analysis"; // set by whichever control opened the file chooser
    var dragDepth = 0;
    var statusText = "";
    var note = "";
    var noteUntil = 0;

    // --- elements ----------------------------------------------------------

    function byId(id) {
        return document.getElementById(id);
    }

    function zoneOf(target) {
        return target && target.closest ? target.closest("#" + ZONE_ID) : null;
    }

    function limitBytes(zone) {
        var mb = parseFloat(zone && zone.getAttribute("data-limit-mb"));
        return isFinite(mb) && mb > 0 ? { mb: mb, bytes: mb * BYTES_PER_MB } : null;
    }

    function uploadUrl(zone) {
        return (zone && zone.getAttribute("data-upload-url")) || DEFAULT_URL;
    }

    function ensureInput() {
        var zone = byId(ZONE_ID);
        if (!zone || byId(INPUT_ID)) {
            return;
        }
        var input = document.createElement("input");
        input.type = "file";
        input.id = INPUT_ID;
        input.accept = ACCEPT;
        input.tabIndex = -1; // the zone is the keyboard control
        input.setAttribute("style", HIDDEN_STYLE);
        zone.appendChild(input);
    }

    // --- messages ----------------------------------------------------------

    function formatMb(bytes) {
        return (bytes / BYTES_PER_MB).toFixed(1);
    }

    function formatSize(bytes) {
        if (bytes < 1024) {
            return bytes + " bytes";
        }
        if (bytes < 0.1 * BYTES_PER_MB) {
            return (bytes / 1024).toFixed(1) + " KB";
        }
        return formatMb(bytes) + " MB";
    }

    function formatLimit(mb) {
        // Like Python's "%g": 50 -> "50", 0.5 -> "0.5".
        return String(Number(mb.toPrecision(6)));
    }

    // Same sentence as webapp.upload.too_large_message; keep the two in step.
    function tooLargeMessage(sizeBytes, limit) {
        var sizeText = formatMb(sizeBytes);
        var limitText = formatLimit(limit.mb) + " MB";
        var opening = parseFloat(sizeText) > limit.mb
            ? "The file is " + sizeText + " MB"
            : "The file is larger than " + limitText;
        return opening + "; this server accepts files up to " + limitText + ". " +
            "Ask the administrator to raise the limit (--max-upload-mb) or split the file.";
    }

    function messageForStatus(status) {
        if (status === 413) {
            return "The file is too large for the server or a proxy in front of it. " +
                "Ask the administrator to raise the limit or split the file.";
        }
        if (status === 502 || status === 503 || status === 504) {
            return "The server did not answer in time (HTTP " + status + "). " +
                "The file may be too large for a proxy in front of Ordinate; try again or tell the administrator.";
        }
        return "The upload failed (HTTP " + status + "). Please try again or tell the administrator.";
    }

    // --- status line and progress -------------------------------------------

    function renderStatus() {
        var el = byId(STATUS_ID);
        if (!el) {
            return;
        }
        var text = statusText;
        if (note && Date.now() < noteUntil) {
            text += (text ? " " : "") + note;
        }
        el.textContent = text;
    }

    function showStatus(text, isError) {
        statusText = text;
        note = "";
        var el = byId(STATUS_ID);
        if (el) {
            el.classList.toggle("is-error", Boolean(isError));
        }
        renderStatus();
    }

    function showNote(text, durationMs) {
        var duration = durationMs || NOTE_MS;
        note = text;
        noteUntil = Date.now() + duration;
        renderStatus();
        window.setTimeout(renderStatus, duration + 50);
    }

    function showProgress(percent) {
        var bar = byId(PROGRESS_ID);
        if (!bar) {
            return;
        }
        bar.hidden = false;
        if (percent === null) {
            bar.removeAttribute("value"); // indeterminate: the server is reading
        } else {
            bar.value = percent;
        }
    }

    function hideProgress() {
        var bar = byId(PROGRESS_ID);
        if (bar) {
            bar.hidden = true;
            bar.value = 0;
        }
    }

    function setBusy(zone, value) {
        busy = value;
        var el = zone || byId(ZONE_ID);
        if (el) {
            el.classList.toggle("is-uploading", value);
            el.setAttribute("aria-busy", value ? "true" : "false");
        }
    }

    // --- talking to Dash ----------------------------------------------------

    function publish(data) {
        data.at = Date.now();
        var dc = window.dash_clientside;
        if (!dc || typeof dc.set_props !== "function") {
            return false;
        }
        try {
            dc.set_props(RESULT_ID, { data: data });
            return true;
        } catch (error) {
            // The status line still tells the user; the console keeps the detail.
            window.console.error("Ordinate upload: could not update " + RESULT_ID, error);
            return false;
        }
    }

    // The reason is shown once, in the page's message list (room for a long sentence); the
    // header's status line only names the file. Without the page, the status line says it all.
    function fail(message, fileName) {
        hideProgress();
        var shown = publish({ error: message });
        var what = fileName ? "“" + fileName + "” was not loaded" : "The file was not loaded";
        var pointer = what + ": see the message below.";
        showStatus(shown ? pointer : message, true);
        if (shown) {
            // The pointer hangs below the top bar over the page: it goes once read; the reason stays.
            window.setTimeout(function () {
                if (statusText === pointer) {
                    showStatus("", false);
                }
            }, POINTER_MS);
        }
    }

    // --- the upload ---------------------------------------------------------

    function start(file, zone, purpose) {
        if (busy) {
            showNote("Another file was ignored: please wait until this upload has finished.");
            return;
        }
        if (!file) {
            return;
        }
        if (file.size === 0) {
            fail("“" + file.name + "” is empty (0 bytes). Choose a CSV file that contains a header row and data.", file.name);
            return;
        }
        var limit = limitBytes(zone);
        if (limit && file.size > limit.bytes) {
            fail(tooLargeMessage(file.size, limit), file.name); // checked here so nothing is sent
            return;
        }
        send(file, zone, purpose || "analysis");
    }

    function send(file, zone, purpose) {
        var xhr = new XMLHttpRequest();
        var totalMb = formatMb(file.size);
        setBusy(zone, true);
        showStatus("Sending “" + file.name + "”: 0 % (0.0 of " + totalMb + " MB)", false);
        showProgress(0);

        xhr.open("POST", uploadUrl(zone), true);
        xhr.setRequestHeader("Content-Type", "application/octet-stream");
        xhr.setRequestHeader("X-Requested-With", "ordinate-upload");
        xhr.setRequestHeader("X-Filename", encodeURIComponent(file.name));
        xhr.setRequestHeader("X-Ordinate-Purpose", purpose);

        xhr.upload.onprogress = function (event) {
            var total = event.lengthComputable ? event.total : file.size;
            var percent = total > 0 ? Math.min(100, Math.floor((event.loaded / total) * 100)) : 0;
            statusText = "Sending “" + file.name + "”: " + percent + " % (" +
                formatMb(event.loaded) + " of " + totalMb + " MB)";
            renderStatus();
            showProgress(percent);
        };
        xhr.upload.onload = function () {
            statusText = "Reading the file…";
            renderStatus();
            showProgress(null);
        };
        xhr.onload = function () {
            setBusy(zone, false);
            var body = null;
            try {
                body = JSON.parse(xhr.responseText);
            } catch (ignored) {
                body = null; // e.g. an HTML error page from a proxy
            }
            if (xhr.status === 200 && body && typeof body.token === "string") {
                hideProgress();
                var published = publish({ token: body.token, summary: body.summary || {}, purpose: purpose });
                if (published) {
                    // A success message fades (it would otherwise sit over the page's top edge);
                    // an error stays until the next file.
                    var after = zone && zone.getAttribute("data-received-note");
                    showStatus("", false);
                    showNote("Received “" + file.name + "” (" + formatSize(file.size) + ")." +
                        (after !== null && after !== undefined ? (after ? " " + after : "") :
                            (purpose === "batch" ? "" : " Its manager link is under “About this data”.")),
                        SUCCESS_MS);
                } else {
                    showStatus("The file was received, but the page is not ready to show it. Reload the page and add the file again.", true);
                }
                return;
            }
            fail(body && typeof body.error === "string" ? body.error : messageForStatus(xhr.status), file.name);
        };
        xhr.onerror = function () {
            setBusy(zone, false);
            fail("The connection to the server was lost during the upload, so the file was not stored. " +
                "Check the network and try again. If this happens only with large files, " +
                "a proxy between you and the server may limit upload sizes: tell the administrator.", file.name);
        };
        xhr.onabort = function () {
            setBusy(zone, false);
            fail("The upload was stopped before it finished, so the file was not stored.", file.name);
        };
        xhr.ontimeout = xhr.onerror;

        xhr.send(file); // the browser streams the file from disk; it is not read into memory here
    }

    function firstFile(files) {
        return files && files.length ? files[0] : null;
    }

    function filesDragged(event) {
        var types = event.dataTransfer && event.dataTransfer.types;
        return Boolean(types) && Array.prototype.indexOf.call(types, "Files") !== -1;
    }

    // --- the file input follows the zone through Dash re-renders ------------

    function watchForZone() {
        ensureInput();
        if (typeof MutationObserver === "function" && document.body) {
            new MutationObserver(ensureInput).observe(document.body, { childList: true, subtree: true });
        }
    }

    if (document.readyState === "loading") {
        document.addEventListener("DOMContentLoaded", watchForZone);
    } else {
        watchForZone();
    }

    // --- delegated listeners ------------------------------------------------

    document.addEventListener("change", function (event) {
        var input = event.target;
        if (!input || input.id !== INPUT_ID) {
            return;
        }
        var file = firstFile(input.files);
        input.value = ""; // so choosing the same file again fires "change" again
        start(file, zoneOf(input) || byId(ZONE_ID), nextPurpose);
    });

    function openChooser(purpose) {
        nextPurpose = purpose;
        var input = byId(INPUT_ID);
        if (input) {
            input.click();
        }
    }

    document.addEventListener("click", function (event) {
        var batchButton = event.target && event.target.closest ? event.target.closest("#" + BATCH_BUTTON_ID) : null;
        if (batchButton) {
            openChooser("batch");
            return;
        }
        var zone = zoneOf(event.target);
        if (!zone || event.target.id === INPUT_ID) {
            return;
        }
        nextPurpose = "analysis";
        // A <label> opens its own file input; a div with role=button needs help.
        if (zone.tagName !== "LABEL") {
            var input = byId(INPUT_ID);
            if (input) {
                input.click();
            }
        }
    });

    document.addEventListener("keydown", function (event) {
        var zone = event.target && event.target.id === ZONE_ID ? event.target : null;
        if (!zone || (event.key !== "Enter" && event.key !== " ")) {
            return;
        }
        event.preventDefault(); // Space would scroll the page
        openChooser("analysis");
    });

    document.addEventListener("dragenter", function (event) {
        var zone = zoneOf(event.target);
        if (!zone || !filesDragged(event)) {
            return;
        }
        event.preventDefault();
        dragDepth += 1;
        zone.classList.add("is-dragging");
    });

    document.addEventListener("dragover", function (event) {
        if (!filesDragged(event)) {
            return;
        }
        // Stop the browser from opening a file dropped beside the zone,
        // which would leave the app and lose the user's work.
        event.preventDefault();
        var zone = zoneOf(event.target);
        event.dataTransfer.dropEffect = zone ? "copy" : "none";
    });

    document.addEventListener("dragleave", function (event) {
        var zone = zoneOf(event.target);
        if (!zone) {
            return;
        }
        dragDepth = Math.max(0, dragDepth - 1);
        if (dragDepth === 0) {
            zone.classList.remove("is-dragging");
        }
    });

    document.addEventListener("drop", function (event) {
        if (!filesDragged(event)) {
            return;
        }
        event.preventDefault();
        dragDepth = 0;
        var zone = zoneOf(event.target);
        var anyZone = byId(ZONE_ID);
        if (anyZone) {
            anyZone.classList.remove("is-dragging");
        }
        if (!zone) {
            return;
        }
        var files = event.dataTransfer.files;
        var wasBusy = busy;
        start(firstFile(files), zone, "analysis");
        if (!wasBusy && busy && files.length > 1) {
            showNote("Only one file is added at a time; “" + files[0].name + "” was used.");
        }
    });
}());
