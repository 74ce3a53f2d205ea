// Follow running checks without reloading: the check page's bar and stage list, and the small bars in
// lists. Polls the status endpoint every 1 s (every 5 s after a minute), pauses while the tab is hidden,
// and reloads the page into the report (or the failure) when the check ends.
(function () {
  "use strict";
  const ENDED = ["done", "failed", "cancelled"];
  const started = Date.now();

  function delay() { return Date.now() - started > 60000 ? 5000 : 1000; }

  function follow(el, render, ended) {
    async function poll() {
      if (document.visibilityState !== "visible") { setTimeout(poll, 1000); return; }
      let s;
      try {
        const r = await fetch(el.dataset.statusUrl, {headers: {"Accept": "application/json"}, cache: "no-store"});
        if (!r.ok) throw new Error(String(r.status));
        s = await r.json();
      } catch (e) { setTimeout(poll, 3000); return; }
      render(s);
      if (ENDED.includes(s.status)) { ended(s); return; }
      setTimeout(poll, delay());
    }
    poll();
  }

  function setBar(bar, fraction) {
    const pct = Math.round(100 * fraction);
    bar.setAttribute("aria-valuenow", String(pct));
    bar.querySelector(".progress-fill").style.width = pct + "%";
    return pct;
  }

  const card = document.getElementById("progress-card");
  if (card && document.getElementById("progress-bar")) {
    const stages = Array.from(document.querySelectorAll("#stages li"));
    const labels = Object.fromEntries(stages.map(li => [li.dataset.stage, li.dataset.label]));
    follow(card, function (s) {
      document.getElementById("percent").textContent = setBar(document.getElementById("progress-bar"), s.progress);
      document.getElementById("status").textContent = s.label;
      document.getElementById("status-line").textContent = s.status === "queued"
        ? s.label.charAt(0).toUpperCase() + s.label.slice(1) : "Checking: " + (labels[s.stage] || s.stage);
      const at = stages.findIndex(li => li.dataset.stage === s.stage);
      stages.forEach(function (li, i) {
        const state = s.status === "done" || (at >= 0 && i < at) ? "done" : i === at ? "current" : "waiting";
        li.className = "stage-" + state;
        li.querySelector(".visually-hidden").textContent = " (" + state + ")";
      });
    }, function () { window.location.replace(card.dataset.pageUrl); });
  }

  document.querySelectorAll(".mini-progress").forEach(function (row) {
    if (ENDED.includes(row.dataset.status)) return;
    follow(row, function (s) {
      setBar(row.querySelector(".progress"), s.progress);
      row.querySelector(".mini-stage").textContent = s.status === "queued" ? s.label : s.stage_label.toLowerCase();
    }, function (s) {
      row.querySelector(".mini-stage").textContent = s.label;
      row.dataset.status = s.status;
    });
  });
})();
