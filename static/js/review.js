/* The review page: pick candidates (click or 1-9), fit a custom model in place, keyboard decisions,
   and inline prompts (a missing reviewer name, a note a risky approval needs) instead of the
   browser's bare "Please fill out this field". */
(function () {
  "use strict";
  var L = window.Lagdesk;
  var form = document.getElementById("decision");
  if (!form) return;
  var saveButton = form.querySelector("[data-key-save]");
  var approveButton = form.querySelector("[data-key-approve]");
  var customChoice = form.querySelector("[data-custom-choice]");
  var customBox = document.getElementById("custom-fit");
  var pickedLabel = form.querySelector("[data-picked-label]");
  var fitted = !!customBox.querySelector("[data-candidate-detail]");
  var reviewerInput = form.querySelector("[data-reviewer]");
  var reviewerPrompt = form.querySelector("[data-reviewer-prompt]");
  var notePrompt = form.querySelector("[data-note-prompt]");
  var transformSelect = form.querySelector("[data-transform]");
  var lambdaField = form.querySelector("[data-lambda]");
  // The checks below say what is missing next to the field; the browser's own bubble is not used.
  form.noValidate = true;

  function radios() { return document.querySelectorAll('input[name="choice"]'); }

  function showCandidate(key) {
    document.querySelectorAll("#candidate-detail [data-candidate-detail]").forEach(function (panel) {
      panel.hidden = panel.dataset.candidateDetail !== key;
    });
    document.querySelectorAll("[data-candidate]").forEach(function (row) {
      row.classList.toggle("selected", row.dataset.candidate === key);
    });
    L.drawCharts(document.getElementById("candidate-detail"));
  }

  function refreshSave() {
    var custom = customChoice.checked;
    saveButton.disabled = custom && !fitted;
    if (pickedLabel) {
      var row = document.querySelector('[data-candidate] input[name="choice"]:checked');
      pickedLabel.textContent = custom ? "custom order" + (fitted ? "" : " (fit it first)")
        : row ? row.closest("tr").querySelector(".order").textContent : "";
    }
  }

  // Candidates beyond the first few are folded away until asked for (all are shown without JS).
  var unfold = document.querySelector("[data-unfold]");
  function setFolded(folded) {
    document.querySelectorAll("[data-fold]").forEach(function (row) { row.hidden = folded; });
    if (unfold) unfold.hidden = !folded;
  }
  if (unfold) {
    setFolded(true);
    unfold.addEventListener("click", function () { setFolded(false); });
  }

  function pick(key) {
    var radio = document.getElementById("choice-" + key);
    if (!radio) return;
    if (radio.closest("[data-fold]")) setFolded(false);
    radio.checked = true;
    showCandidate(key);
    refreshSave();
  }

  document.querySelectorAll("[data-candidate]").forEach(function (row) {
    row.addEventListener("click", function (event) {
      if (event.target.closest("a")) event.preventDefault();
      pick(row.dataset.candidate);
    });
  });
  radios().forEach(function (radio) { radio.addEventListener("change", refreshSave); });

  function customChanged() {
    customChoice.checked = true;
    fitted = false;
    customBox.innerHTML = "";
    refreshSave();
  }

  function refreshLambda() {
    lambdaField.hidden = transformSelect.value !== "box_cox";
  }

  form.querySelectorAll("[data-custom-fields] input").forEach(function (input) {
    input.addEventListener("input", customChanged);
    input.addEventListener("keydown", function (event) {
      if (event.key === "Enter") { event.preventDefault(); fit(); }
    });
  });
  form.querySelectorAll("[data-custom-fields] select").forEach(function (select) {
    select.addEventListener("change", function () { customChanged(); refreshLambda(); });
  });
  refreshLambda();

  // Every action but a fit saves a verdict, which records who decided it; approving a risky
  // suggestion needs a note too. Say so next to the field, and keep the form from going.
  function prompt(box, field) {
    box.hidden = false;
    field.focus();
  }

  form.addEventListener("submit", function (event) {
    var action = event.submitter ? event.submitter.value : "save";
    if (action === "fit") return;
    if (reviewerInput && !reviewerInput.value.trim()) {
      event.preventDefault();
      prompt(reviewerPrompt, reviewerInput);
      return;
    }
    if (action === "approve" && event.submitter.hasAttribute("data-needs-note") && !form.elements.note.value.trim()) {
      event.preventDefault();
      prompt(notePrompt, form.elements.note);
    }
  });
  if (reviewerInput) {
    reviewerInput.addEventListener("input", function () { reviewerPrompt.hidden = true; });
  }
  form.elements.note.addEventListener("input", function () { notePrompt.hidden = true; });

  function fit() {
    var data = new FormData(form);
    data.set("action", "fit");
    data.set("fragment", "true");
    customChoice.checked = true;
    fitted = false;
    refreshSave();
    customBox.innerHTML = '<p class="muted small" role="status">Fitting…</p>';
    fetch(form.dataset.fitUrl, { method: "POST", body: data })
      .then(function (response) {
        return response.text().then(function (html) { return { ok: response.ok, html: html }; });
      })
      .then(function (result) {
        customBox.innerHTML = result.html;
        fitted = result.ok;
        refreshSave();
        L.drawCharts(customBox);
      })
      .catch(function () {
        customBox.innerHTML = '<p class="message message-error" role="alert">The server did not answer; try again.</p>';
      });
  }

  form.querySelectorAll("[data-fit]").forEach(function (button) {
    button.addEventListener("click", function (event) { event.preventDefault(); fit(); });
  });

  document.addEventListener("click", function (event) {
    var refit = event.target.closest("[data-refit]");
    if (!refit) return;
    var values = refit.dataset.refit.split(",");
    ["p", "d", "q", "P", "D", "Q", "s"].forEach(function (name, i) { form.elements[name].value = values[i]; });
    fit();
    document.getElementById("decision-panel").scrollIntoView({ behavior: "smooth", block: "start" });
  });

  // Forecast check in place: the link's page as a fragment, into the candidate's panel.
  document.addEventListener("click", function (event) {
    var link = event.target.closest("[data-forecast-check]");
    if (!link) return;
    event.preventDefault();
    var box = link.closest("[data-forecast-box]");
    box.innerHTML = '<p class="muted small" role="status">Checking forecasts (refits at each origin)…</p>';
    fetch(link.href + "&fragment=true")
      .then(function (response) { return response.text(); })
      .then(function (html) { box.innerHTML = html; L.drawCharts(box); })
      .catch(function () {
        box.innerHTML = '<p class="message message-error" role="alert">The server did not answer; try again.</p>';
      });
  });

  function submitWith(button) {
    if (button && !button.disabled) form.requestSubmit(button);
  }

  L.keys.a = function () { submitWith(approveButton); };
  L.keys.s = function () { submitWith(saveButton); };
  L.keys.e = function () { form.elements.note.focus(); };
  L.keys.c = function () {
    customChoice.checked = true;
    refreshSave();
    form.querySelector("[data-first-custom]").focus();
  };
  L.keys.n = function () { L.follow("[data-key-next]"); };
  L.keys.p = function () { L.follow("[data-key-prev]"); };
  L.keys.u = function () { L.follow("[data-key-up]"); };
  for (var i = 1; i <= 9; i++) {
    (function (key) { L.keys[key] = function () { pick(key); }; })(String(i));
  }
  // The correlograms of the series with the interventions taken out (as identified) or left in.
  document.querySelectorAll("[data-correlogram-switch] input").forEach(function (radio) {
    radio.addEventListener("change", function () {
      var panel = radio.closest("[data-correlograms]");
      panel.querySelectorAll("[data-correlogram-view]").forEach(function (view) {
        view.hidden = view.dataset.correlogramView !== radio.value;
      });
      L.drawCharts(panel);
    });
  });
  refreshSave();
})();
