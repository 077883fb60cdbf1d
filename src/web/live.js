// turnbook's live pages: when the service counts a commit it sends a "change" event on
// /events; the page then fetches itself again and swaps its main content. Without
// JavaScript the pages are complete; they just do not update on their own.
(function () {
  "use strict";
  var state = document.getElementById("live-state");
  function say(text, cls) {
    if (state) { state.textContent = text; state.className = "live " + cls; }
  }
  function refresh() {
    fetch(window.location.href, { cache: "no-store", credentials: "same-origin" })
      .then(function (r) { return r.ok ? r.text() : Promise.reject(r.status); })
      .then(function (text) {
        var doc = new DOMParser().parseFromString(text, "text/html");
        var fresh = doc.getElementById("content");
        var old = document.getElementById("content");
        if (fresh && old) {
          var n = Number(old.getAttribute("data-refreshes") || "0") + 1;
          fresh.setAttribute("data-refreshes", String(n));
          old.replaceWith(fresh);
        }
        say("live: updated " + new Date().toLocaleTimeString(), "on");
      })
      .catch(function () { say("live: could not refresh", "off"); });
  }
  if (!window.EventSource) { say("static page (reload to update)", "off"); return; }
  say("live: connecting", "wait");
  var events = new EventSource("/events");
  events.addEventListener("open", function () { say("live", "on"); });
  events.addEventListener("change", refresh);
  events.addEventListener("error", function () { say("live: reconnecting", "off"); });
})();
