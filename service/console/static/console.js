// Bellwether console: live progress of background work, and pan and zoom of the network picture.
"use strict";

(function () {
  function words(state) {
    return state.finished ? state.status_words : state.status_words + " · " + Math.round(state.progress * 100) + "%";
  }

  function follow(box) {
    var id = box.getAttribute("data-job");
    var bar = box.querySelector("progress");
    var label = box.querySelector(".state");
    var message = document.querySelector('[data-message-for="' + id + '"]');
    function poll() {
      fetch("/console/jobs/" + encodeURIComponent(id) + "/state", { credentials: "same-origin", cache: "no-store" })
        .then(function (r) { return r.ok ? r.json() : null; })
        .then(function (state) {
          if (!state) { return; }
          bar.value = state.status === "succeeded" ? 1 : state.progress;
          label.textContent = words(state);
          if (message) { message.textContent = state.message; }
          if (state.finished) {
            box.classList.remove("live");
            if (box.getAttribute("data-reload")) { window.location.reload(); }
          } else {
            window.setTimeout(poll, 1000);
          }
        })
        .catch(function () { window.setTimeout(poll, 3000); });
    }
    window.setTimeout(poll, 500);
  }

  function panZoom(figure) {
    var svg = figure.querySelector("svg");
    if (!svg) { return; }
    var start = svg.viewBox.baseVal;
    var home = [start.x, start.y, start.width, start.height];
    var view = home.slice();
    function apply() { svg.setAttribute("viewBox", view.join(" ")); }
    function zoom(factor, cx, cy) {
      var w = view[2] * factor, h = view[3] * factor;
      if (w < home[2] / 40 || w > home[2] * 4) { return; }
      view = [cx - (cx - view[0]) * factor, cy - (cy - view[1]) * factor, w, h];
      apply();
    }
    function centre() { return [view[0] + view[2] / 2, view[1] + view[3] / 2]; }
    function toView(evt) {
      var box = svg.getBoundingClientRect();
      return [view[0] + (evt.clientX - box.left) / box.width * view[2], view[1] + (evt.clientY - box.top) / box.height * view[3]];
    }
    svg.addEventListener("wheel", function (evt) {
      evt.preventDefault();
      var p = toView(evt);
      zoom(evt.deltaY < 0 ? 0.8 : 1.25, p[0], p[1]);
    }, { passive: false });
    var drag = null;
    svg.addEventListener("pointerdown", function (evt) {
      drag = { x: evt.clientX, y: evt.clientY, view: view.slice() };
      svg.setPointerCapture(evt.pointerId);
    });
    svg.addEventListener("pointermove", function (evt) {
      if (!drag) { return; }
      var box = svg.getBoundingClientRect();
      view[0] = drag.view[0] - (evt.clientX - drag.x) / box.width * view[2];
      view[1] = drag.view[1] - (evt.clientY - drag.y) / box.height * view[3];
      apply();
    });
    svg.addEventListener("pointerup", function () { drag = null; });
    function step(dx, dy) { view[0] += dx * view[2] * 0.1; view[1] += dy * view[3] * 0.1; apply(); }
    figure.addEventListener("click", function (evt) {
      var act = evt.target.getAttribute && evt.target.getAttribute("data-zoom");
      if (!act) { return; }
      var c = centre();
      if (act === "in") { zoom(0.8, c[0], c[1]); }
      if (act === "out") { zoom(1.25, c[0], c[1]); }
      if (act === "reset") { view = home.slice(); apply(); }
    });
    svg.addEventListener("keydown", function (evt) {
      var keys = { ArrowLeft: [-1, 0], ArrowRight: [1, 0], ArrowUp: [0, -1], ArrowDown: [0, 1] };
      var c = centre();
      if (keys[evt.key]) { step(keys[evt.key][0], keys[evt.key][1]); evt.preventDefault(); }
      else if (evt.key === "+" || evt.key === "=") { zoom(0.8, c[0], c[1]); evt.preventDefault(); }
      else if (evt.key === "-") { zoom(1.25, c[0], c[1]); evt.preventDefault(); }
      else if (evt.key === "0") { view = home.slice(); apply(); evt.preventDefault(); }
    });
  }

  document.addEventListener("DOMContentLoaded", function () {
    document.querySelectorAll(".progress.live").forEach(follow);
    document.querySelectorAll("[data-pan-zoom]").forEach(panZoom);
  });
})();
