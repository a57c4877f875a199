/* Follows one check run: polls its status JSON and shows the verdict when the run finishes.
   Builds no markup from strings: level badges are cloned from a <template>, text goes in textContent. */
(function () {
  "use strict";
  var panel = document.getElementById("run");
  if (!panel || panel.getAttribute("data-finished") === "yes") { return; }
  var url = panel.getAttribute("data-status-url");
  var stateText = document.getElementById("run-state");
  var delay = 700;

  function badge(level) {
    var templates = document.getElementById("level-templates");
    var found = templates && templates.content.querySelector(".level--" + level);
    if (!found) {
      var span = document.createElement("span");
      span.className = "level level--unchecked";
      span.textContent = level || "unchecked";
      return span;
    }
    return found.cloneNode(true);
  }

  function show(status) {
    var verdict = document.getElementById("run-verdict");
    var meaning = document.getElementById("run-meaning");
    var list = document.getElementById("run-requests");
    verdict.replaceChildren(badge(status.state === "done" ? status.verdict : "unchecked"));
    if (status.state === "done") {
      var shown = verdict.querySelector(".level");
      meaning.textContent = shown ? (shown.getAttribute("title") || "") : "";
    } else {
      meaning.textContent = status.error || "The check could not be completed.";
    }
    list.replaceChildren();
    (status.requests || []).forEach(function (item) {
      var li = document.createElement("li");
      li.appendChild(document.createTextNode("Request " + item.label + " (" + item.target + "): "));
      li.appendChild(badge(item.verdict));
      list.appendChild(li);
    });
    document.getElementById("run-link").setAttribute("href", status.proposal_url);
    document.getElementById("run-progress").hidden = true;
    document.getElementById("run-result").hidden = false;
    panel.setAttribute("data-finished", "yes");
  }

  function poll() {
    fetch(url, { headers: { "Accept": "application/json" }, credentials: "same-origin", cache: "no-store" })
      .then(function (response) {
        if (!response.ok) { throw new Error("status " + response.status); }
        return response.json();
      })
      .then(function (status) {
        if (status.finished) { show(status); return; }
        stateText.textContent = status.state === "queued" ? "Waiting for a worker…" : "Checking visibility, Moon, sensitivity and schedule…";
        delay = Math.min(delay * 1.3, 3000);
        window.setTimeout(poll, delay);
      })
      .catch(function () {
        stateText.textContent = "Lost contact with the service; trying again…";
        delay = Math.min(delay * 2, 10000);
        window.setTimeout(poll, delay);
      });
  }

  window.setTimeout(poll, delay);
}());
