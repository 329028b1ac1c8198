// nightloom live pages: follow the page's event stream and refetch its
// content when the plan or the progress changes; count down to the next
// run; red night mode. Without JavaScript the page shows the same content
// on reload.
(function () {
  "use strict";
  var root = document.getElementById("content");
  var html = document.documentElement;

  // Red night mode, remembered by this browser.
  var red = document.getElementById("red");
  if (red) {
    red.hidden = false;
    if (localStorage.getItem("nightloom-red") === "1") html.classList.add("red");
    red.addEventListener("click", function () {
      var on = html.classList.toggle("red");
      localStorage.setItem("nightloom-red", on ? "1" : "0");
    });
  }

  function pad(n) { return n < 10 ? "0" + n : "" + n; }
  // The countdown follows the server's clock (a phone's may be off): skew
  // is the server's "now" on the page minus this browser's clock.
  var skew = 0;
  function syncClock() {
    var el = document.getElementById("now");
    if (el && el.getAttribute("data-now")) skew = Date.parse(el.getAttribute("data-now")) - Date.now();
  }
  syncClock();
  function tick() {
    var els = document.querySelectorAll(".countdown[data-at]");
    for (var i = 0; i < els.length; i++) {
      var s = Math.max(0, Math.round((Date.parse(els[i].getAttribute("data-at")) - Date.now() - skew) / 1000));
      var h = Math.floor(s / 3600), m = Math.floor((s % 3600) / 60);
      els[i].textContent = (h > 0 ? h + "h" + pad(m) + "m" : m + "m" + pad(s % 60) + "s");
    }
  }
  setInterval(tick, 1000);

  if (!root || !root.dataset.live || !window.EventSource) return;
  var state = document.getElementById("live-state");
  function signIn() {
    location.assign("/signin?next=" + encodeURIComponent(location.pathname + location.search));
  }
  var busy = false, again = false;
  function refresh() {
    if (busy) { again = true; return; }
    busy = true;
    fetch(root.dataset.fragment, { credentials: "same-origin", cache: "no-store", redirect: "manual" })
      .then(function (r) {
        if (r.status === 401 || r.type === "opaqueredirect") { signIn(); return null; }
        return r.ok ? r.text() : null;
      })
      .then(function (text) {
        if (text !== null && text !== undefined) {
          root.innerHTML = text;
          root.setAttribute("data-updated", String(Date.now()));
          state = document.getElementById("live-state");
          syncClock();
          if (state) state.textContent = "● live";
          tick();
        }
      })
      .catch(function () {})
      .then(function () {
        busy = false;
        if (again) { again = false; refresh(); }
      });
  }
  var es = new EventSource(root.dataset.live);
  es.addEventListener("open", function () { if (state) state.textContent = "● live"; });
  es.addEventListener("change", refresh);
  es.addEventListener("signin", function () { es.close(); signIn(); });
  es.addEventListener("error", function () {
    if (state) state.textContent = "○ reconnecting";
    // A refused stream (401) closes for good: the fragment fetch tells.
    if (es.readyState === EventSource.CLOSED) refresh();
  });
})();
