/* The review page: tick two or three candidates and compare their forecast checks in place;
   the candidate table's MASE column filled in as forecast checks come back.
   Without JavaScript the "Compare forecasts" form opens the comparison as a page. */
(function () {
  "use strict";
  var L = window.Lagdesk;
  var form = document.getElementById("compare");
  if (!form) return;
  var MIN = 2, MAX = 3;
  var button = form.querySelector("[data-compare-button]");
  var hint = form.querySelector("[data-compare-hint]");
  var panel = document.querySelector("[data-comparison-box]");
  var body = panel.querySelector("[data-comparison-body]");
  var boxes = Array.prototype.slice.call(document.querySelectorAll("[data-compare-pick]"));

  function picked() { return boxes.filter(function (box) { return box.checked; }); }

  function refresh() {
    var count = picked().length;
    boxes.forEach(function (box) { box.disabled = !box.checked && count >= MAX; });
    button.disabled = count < MIN;
    hint.textContent = count < MIN
      ? "Tick " + (MIN - count) + " more candidate" + (count === MIN - 1 ? "" : "s") + " (Compare) to see their forecast checks side by side."
      : count + " candidates ticked" + (count >= MAX ? " (the most a comparison takes)." : ".");
  }

  // Ticking for comparison is not picking the candidate for the decision: keep the click
  // from reaching the row, whose click picks it.
  boxes.forEach(function (box) {
    box.closest("td").addEventListener("click", function (event) {
      event.stopPropagation();
      if (event.target !== box && !box.disabled) { box.checked = !box.checked; refresh(); }
    });
    box.addEventListener("change", refresh);
  });

  // A forecast score in the candidate table's MASE column, once a check of that order is back.
  function showScore(orders, mase) {
    var cell = document.querySelector('[data-mase-for="' + orders + '"]');
    if (cell) cell.textContent = mase;
  }

  function showScores(root) {
    root.querySelectorAll("[data-forecast-result][data-checked]").forEach(function (result) {
      showScore(result.dataset.checked, result.dataset.mase);
    });
    root.querySelectorAll("[data-compared]").forEach(function (row) {
      showScore(row.dataset.compared, row.dataset.mase);
    });
  }

  // Single forecast checks are put in place by review.js: watch for them.
  new MutationObserver(function (changes) {
    changes.forEach(function (change) {
      change.addedNodes.forEach(function (node) { if (node.querySelectorAll) showScores(node); });
    });
  }).observe(document.getElementById("candidate-detail") || document.body, { childList: true, subtree: true });

  form.addEventListener("submit", function (event) {
    event.preventDefault();
    if (picked().length < MIN) return;
    var query = new URLSearchParams(new FormData(form));
    query.set("fragment", "true");
    panel.hidden = false;
    body.innerHTML = '<p class="muted small" role="status">Checking ' + picked().length +
      " models’ forecasts (each refitted at every origin)…</p>";
    button.disabled = true;
    panel.scrollIntoView({ behavior: "smooth", block: "start" });
    fetch(form.action + "?" + query.toString())
      .then(function (response) { return response.text(); })
      .then(function (html) {
        body.innerHTML = html;
        L.drawCharts(body);
        showScores(body);
      })
      .catch(function () {
        body.innerHTML = '<p class="message message-error" role="alert">The server did not answer; try again.</p>';
      })
      .then(refresh);
  });

  refresh();
})();
