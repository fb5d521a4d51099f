/* Lagdesk pages: keyboard shortcuts, the help overlay, charts, run progress.
   Everything here is an addition: each page works with plain links and forms without it. */
(function () {
  "use strict";

  var keys = {};

  function typing(target) {
    var tag = target && target.tagName;
    return tag === "INPUT" || tag === "TEXTAREA" || tag === "SELECT" || (target && target.isContentEditable);
  }

  function openHelp() {
    var dialog = document.getElementById("help");
    if (dialog && !dialog.open) dialog.showModal();
  }

  function follow(selector) {
    var link = document.querySelector(selector);
    if (link && link.href) window.location.href = link.href;
  }

  // The figures come with transparent backgrounds; their text and grid take the colours of
  // the page's scheme (light or dark, --chart-ink and --chart-grid in lagdesk.css).
  var darkScheme = window.matchMedia ? window.matchMedia("(prefers-color-scheme: dark)") : null;

  function schemeColours(layout) {
    var style = getComputedStyle(document.documentElement);
    var ink = style.getPropertyValue("--chart-ink").trim();
    var grid = style.getPropertyValue("--chart-grid").trim();
    var update = { "font.color": ink, "legend.font.color": ink };
    Object.keys(layout).forEach(function (key) {
      if (/^[xy]axis\d*$/.test(key)) {
        update[key + ".gridcolor"] = grid;
        update[key + ".linecolor"] = grid;
      }
    });
    return update;
  }

  function applyScheme(layout, update) {
    Object.keys(update).forEach(function (path) {
      var parts = path.split("."), target = layout;
      parts.slice(0, -1).forEach(function (part) { target = target[part] = target[part] || {}; });
      target[parts[parts.length - 1]] = update[path];
    });
    return layout;
  }

  function drawCharts(root) {
    if (!window.Plotly) return;
    (root || document).querySelectorAll(".chart[data-figure]").forEach(function (el) {
      if (el.dataset.drawn || el.offsetParent === null) return;  // hidden charts are drawn when shown
      var figure = JSON.parse(el.dataset.figure);
      el.dataset.drawn = "1";
      el.innerHTML = "";
      var layout = applyScheme(figure.layout, schemeColours(figure.layout));
      window.Plotly.newPlot(el, figure.data, layout, { displayModeBar: false, responsive: true });
    });
  }

  if (darkScheme && darkScheme.addEventListener) {
    darkScheme.addEventListener("change", function () {
      document.querySelectorAll('.chart[data-drawn="1"]').forEach(function (el) {
        window.Plotly.relayout(el, schemeColours(el.layout));
      });
    });
  }

  function pollRun(el, onUpdate) {
    var url = el.dataset.runUrl;
    function tick() {
      fetch(url, { headers: { Accept: "application/json" } })
        .then(function (r) { return r.ok ? r.json() : null; })
        .then(function (run) {
          if (!run) return;
          onUpdate(run);
          if (run.state === "running") window.setTimeout(tick, 1500);
        })
        .catch(function () { window.setTimeout(tick, 5000); });
    }
    tick();
  }

  function setupRunProgress() {
    var box = document.querySelector("[data-run-progress]");
    if (box) {
      pollRun(box, function (run) {
        ["state", "done", "total", "failed"].forEach(function (name) {
          var field = box.querySelector('[data-field="' + name + '"]');
          if (field) field.textContent = run[name];
        });
        var duration = box.querySelector('[data-field="duration_s"]');
        if (duration && run.duration_s !== null) duration.textContent = Math.round(run.duration_s);
        var state = box.querySelector('[data-field="state"]');
        if (state) state.className = "run-state run-" + run.state;
        var bar = box.querySelector("[data-field-progress]");
        if (bar) { bar.max = Math.max(run.total, 1); bar.value = run.done; }
      });
    }
    var banner = document.getElementById("run-banner");
    if (banner) {
      banner.dataset.runUrl = "/api/runs/" + banner.dataset.runId;
      pollRun(banner, function (run) {
        var done = banner.querySelector("[data-run-done]");
        if (done) done.textContent = run.done;
        if (run.state !== "running") banner.firstChild.textContent = "Analysis run " + run.run_id + " " + run.state + ": ";
      });
    }
  }

  function setupQueue() {
    var rows = Array.prototype.slice.call(document.querySelectorAll("[data-queue] [data-row]"));
    var search = document.querySelector("[data-search]");
    if (search && window.location.hash === "#search") search.focus();
    if (!rows.length && !search) return;
    var marked = -1;
    function mark(i) {
      if (!rows.length) return;
      if (marked >= 0) rows[marked].classList.remove("row-marked");
      marked = Math.max(0, Math.min(rows.length - 1, i));
      rows[marked].classList.add("row-marked");
      rows[marked].scrollIntoView({ block: "nearest" });
    }
    keys.j = function () { mark(marked + 1); };
    keys.k = function () { mark(marked - 1); };
    keys.Enter = function () {
      if (marked >= 0) rows[marked].querySelector("[data-open]").click();
    };
    keys.x = function () {
      if (marked < 0) return;
      var box = rows[marked].querySelector("[data-pick]");
      box.checked = !box.checked;
      countPicked();
    };
  }

  // Ticked rows: their count beside the park form, and a box that ticks the whole page.
  function countPicked() {
    var count = document.querySelector("[data-picked-count]");
    if (count) count.textContent = document.querySelectorAll("[data-pick]:checked").length;
  }

  function setupPicking() {
    var all = document.querySelector("[data-pick-all]");
    if (all) {
      all.addEventListener("change", function () {
        document.querySelectorAll("[data-pick]").forEach(function (box) { box.checked = all.checked; });
        countPicked();
      });
    }
    document.querySelectorAll("[data-pick]").forEach(function (box) { box.addEventListener("change", countPicked); });
    countPicked();
  }

  // A new page size opens the page that holds the first row shown now.
  function setupPager() {
    var pager = document.querySelector("[data-pager]");
    if (!pager) return;
    pager.querySelector("[data-page-size]").addEventListener("change", function (event) {
      var size = parseInt(event.target.value, 10);
      pager.querySelector("[data-page-input]").value = Math.floor(parseInt(pager.dataset.offset, 10) / size) + 1;
      pager.submit();
    });
  }

  document.addEventListener("keydown", function (event) {
    if (event.ctrlKey || event.metaKey || event.altKey) return;
    if (event.key === "Escape" && typing(event.target)) { event.target.blur(); return; }
    if (typing(event.target)) return;
    var dialog = document.getElementById("help");
    if (dialog && dialog.open) return;
    if (event.key === "?") { event.preventDefault(); openHelp(); return; }
    if (event.key === "/") {
      event.preventDefault();
      var search = document.querySelector("[data-search]");
      if (search) search.focus(); else window.location.href = "/#search";
      return;
    }
    var handler = keys[event.key];
    if (handler) { event.preventDefault(); handler(event); }
  });

  document.addEventListener("click", function (event) {
    if (event.target.closest("[data-open-help]")) openHelp();
  });

  window.Lagdesk = { keys: keys, drawCharts: drawCharts, follow: follow };

  document.addEventListener("DOMContentLoaded", function () {
    setupQueue();
    setupPager();
    setupPicking();
    setupRunProgress();
    drawCharts(document);
  });
})();
