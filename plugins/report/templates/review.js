// vzero well review: step through the flagged wells, decide keep or exclude with a reason, save the
// decisions as a recipe fragment. No network, no storage: everything stays in this page until saved.
(function () {
  "use strict";
  var data = JSON.parse(document.getElementById("data").textContent);
  var wells = data.wells;
  if (!wells.length) { return; }
  var cards = Array.prototype.slice.call(document.querySelectorAll("article.card"));
  var picks = Array.prototype.slice.call(document.querySelectorAll("button.pick"));
  var reason = document.getElementById("reason");
  var previous = data.previous || {};  // decisions the run's recipe already holds: a second review extends them
  var decisions = wells.map(function (w) {
    var p = previous[w.id];
    return p ? { choice: p.choice, reason: p.reason } : { choice: "", reason: "" };
  });
  var current = 0;
  var FILE = "review-decisions.yaml";

  function flagWords(w) { return w.flags.map(function (f) { return f.replace(/_/g, " "); }).join(", "); }

  function show(i) {
    current = Math.max(0, Math.min(wells.length - 1, i));
    cards.forEach(function (c, k) { c.hidden = k !== current; });
    picks.forEach(function (p, k) { p.classList.toggle("current", k === current); });
    picks[current].scrollIntoView({ block: "nearest" });
    var d = decisions[current];
    reason.value = d.reason;
    document.getElementById("position").textContent = "Well " + (current + 1) + " of " + wells.length + ": " +
      wells[current].plate + " " + wells[current].well;
    document.getElementById("keep").setAttribute("aria-pressed", String(d.choice === "keep"));
    document.getElementById("exclude").setAttribute("aria-pressed", String(d.choice === "exclude"));
    document.getElementById("state").textContent = d.choice ? "Decision: " + d.choice + (d.reason ? " (" +
      d.reason + ")" : "") : "No decision yet (an undecided well stays as the run left it).";
  }

  function decide(choice) {
    var d = decisions[current];
    var w = wells[current];
    d.choice = choice;
    if (!reason.value.trim()) {
      reason.value = "flagged " + flagWords(w);  // the run adds "kept on review" or "excluded on review"
    }
    d.reason = reason.value.trim();
    picks[current].classList.remove("keep", "exclude");
    picks[current].classList.add(choice);
    show(current);
  }

  function q(text) { return JSON.stringify(String(text)); }  // a JSON string is a YAML double-quoted scalar

  function fragment() {
    // Every decision as data under review: (keep and exclude alike, each with its reason); the recipe includes
    // this file, so the next run applies the exclusions and its audit file records every decision.
    var lines = ["# vzero review of run " + (data.run || "?") + " (recipe " + (data.recipe || "?") + "), " +
                 new Date().toISOString().slice(0, 19) + "Z",
                 "# Add it to the recipe with   include: [" + FILE + "]",
                 "# or give it after the recipe: vzero rerun run.h5 --recipe RECIPE --recipe " + FILE + " --out DIR",
                 "review:"];
    var n = 0;
    wells.forEach(function (w, i) {
      var d = decisions[i];
      if (d.choice !== "keep" && d.choice !== "exclude") { return; }
      lines.push("  - {plate: " + q(w.plate) + ", well: " + q(w.well) + ", decision: " + d.choice +
                 ", reason: " + q(d.reason.replace(/[\r\n]+/g, " ")) + "}");
      n += 1;
    });
    if (!n) { lines[lines.length - 1] = "review: []"; }
    return lines.join("\n") + "\n";
  }

  function save() {
    var text = fragment();
    var area = document.getElementById("fragment");
    area.value = text;
    var link = document.getElementById("download");
    if (link.href && link.href.indexOf("blob:") === 0) { URL.revokeObjectURL(link.href); }
    link.href = URL.createObjectURL(new Blob([text], { type: "text/yaml" }));
    link.hidden = false;
    return text;
  }

  picks.forEach(function (p, k) { p.addEventListener("click", function () { show(k); }); });
  document.getElementById("prev").addEventListener("click", function () { show(current - 1); });
  document.getElementById("next").addEventListener("click", function () { show(current + 1); });
  document.getElementById("keep").addEventListener("click", function () { decide("keep"); });
  document.getElementById("exclude").addEventListener("click", function () { decide("exclude"); });
  document.getElementById("save").addEventListener("click", save);
  reason.addEventListener("input", function () {
    if (decisions[current].choice) { decisions[current].reason = reason.value.trim(); }
  });
  reason.addEventListener("keydown", function (ev) {
    if (ev.key === "Enter") { ev.preventDefault(); reason.blur(); }
    if (ev.key === "Escape") { reason.blur(); }
  });
  document.addEventListener("keydown", function (ev) {
    if (ev.target === reason || ev.target.tagName === "TEXTAREA" || ev.ctrlKey || ev.metaKey || ev.altKey) { return; }
    var k = ev.key;
    if (k === "ArrowRight" || k === "j") { show(current + 1); }
    else if (k === "ArrowLeft" || k === "h") { show(current - 1); }
    else if (k === "k") { decide("keep"); }
    else if (k === "x") { decide("exclude"); }
    else if (k === "r") { reason.focus(); reason.select(); }
    else if (k === "s") { save(); }
    else { return; }
    ev.preventDefault();
  });
  picks.forEach(function (p, k) { if (decisions[k].choice) { p.classList.add(decisions[k].choice); } });
  window.vzeroReview = { show: show, decide: decide, save: save, fragment: fragment };
  show(0);
})();
