// Walk the steps of a procedure or plan: a slider, buttons and the arrow keys (or j/k) move
// the current step; the row, the step's details and its drawing follow. A drawing not in the
// page (data-drawing-url: the procedure page draws only the step it opens at) is fetched with
// htmx when its step is shown, and those of the steps either side with it, so the next key
// press finds its drawing there. Without JavaScript every step's details stay visible, one
// after another, each drawing not in the page behind a link. The builder's verdict is swapped
// in by htmx, so walkers are set up again after each swap.
(function () {
  "use strict";
  var active = null;
  function fetchDrawing(root, n) {
    var el = root.querySelector("[data-step-detail='" + n + "'] [data-drawing-url]");
    if (!el || el.getAttribute("data-drawing-state")) return;
    if (!window.htmx || document.readyState === "loading") {
      // htmx loads deferred and starts on DOMContentLoaded: fetch once it has started
      if (!el.getAttribute("data-drawing-wait")) {
        el.setAttribute("data-drawing-wait", "1");
        document.addEventListener("DOMContentLoaded", function () {
          setTimeout(function () { fetchDrawing(root, n); }, 0);
        });
      }
      return;
    }
    el.setAttribute("data-drawing-state", "loading");
    function retry() { el.removeAttribute("data-drawing-state"); }  // next time it is shown
    try {
      window.htmx.ajax("GET", el.getAttribute("data-drawing-url"), {target: el, swap: "innerHTML"})
        .then(function () { el.setAttribute("data-drawing-state", "loaded"); el.removeAttribute("aria-busy"); }, retry);
    } catch (e) { retry(); }
  }
  function setup(root) {
    if (root.getAttribute("data-walker-ready")) return;
    root.setAttribute("data-walker-ready", "1");
    var slider = root.querySelector("[data-step-slider]");
    if (!slider) return;
    var max = parseInt(slider.max, 10);
    function show(n, scroll) {
      n = Math.max(0, Math.min(max, n));
      slider.value = String(n);
      root.querySelectorAll("[data-step-row]").forEach(function (r) {
        var on = r.getAttribute("data-step-row") === String(n);
        r.classList.toggle("current", on);
        if (on) r.setAttribute("aria-current", "step"); else r.removeAttribute("aria-current");
        if (on && scroll) r.scrollIntoView({block: "nearest"});
      });
      root.querySelectorAll("[data-step-detail]").forEach(function (d) {
        d.hidden = d.getAttribute("data-step-detail") !== String(n);
      });
      fetchDrawing(root, n);
      if (n < max) fetchDrawing(root, n + 1);
      if (n > 0) fetchDrawing(root, n - 1);
      var label = root.querySelector("[data-step-label]");
      if (label) label.textContent = label.getAttribute("data-template").replace("N", n).replace("M", max);
      root.setAttribute("data-current-step", String(n));
    }
    root.walk = function (delta) { show(parseInt(slider.value, 10) + delta, true); };
    root.walkTo = function (n) { show(n, true); };
    slider.addEventListener("input", function () { show(parseInt(slider.value, 10)); active = root; });
    root.querySelectorAll("[data-step-go]").forEach(function (b) {
      b.addEventListener("click", function () { active = root; root.walk(parseInt(b.getAttribute("data-step-go"), 10)); });
    });
    root.querySelectorAll("[data-step-row]").forEach(function (r) {
      r.addEventListener("click", function () { active = root; show(parseInt(r.getAttribute("data-step-row"), 10)); });
    });
    root.querySelectorAll(".walker").forEach(function (w) { w.hidden = false; });
    show(parseInt(root.getAttribute("data-start-step") || "0", 10));
    active = root;
  }
  function setupAll() { document.querySelectorAll("[data-steps]").forEach(setup); }
  document.addEventListener("keydown", function (e) {
    if (!active || !document.body.contains(active)) return;
    var t = e.target && e.target.tagName;
    if (t === "SELECT" || t === "TEXTAREA" || t === "BUTTON") return;
    if (t === "INPUT" && !e.target.hasAttribute("data-step-slider")) return;
    if (e.target.hasAttribute && e.target.hasAttribute("data-step-slider")) return; // the slider moves itself
    if (e.key === "ArrowRight" || e.key === "j") { active.walk(1); e.preventDefault(); }
    else if (e.key === "ArrowLeft" || e.key === "k") { active.walk(-1); e.preventDefault(); }
    else if (e.key === "Home") { active.walkTo(0); e.preventDefault(); }
    else if (e.key === "End") { active.walkTo(1e9); e.preventDefault(); }
  });
  setupAll();
  document.addEventListener("htmx:afterSettle", setupAll);
})();
