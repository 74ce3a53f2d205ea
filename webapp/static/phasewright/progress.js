// Poll the check's status and move the bar; reload into the report when it is done.
(function () {
  const card = document.getElementById("progress-card");
  if (!card || !document.getElementById("progress-fill")) return;
  const fill = document.getElementById("progress-fill");
  const bar = fill.parentElement;
  async function poll() {
    let s;
    try {
      const r = await fetch(card.dataset.statusUrl, {headers: {"Accept": "application/json"}});
      if (!r.ok) throw new Error(r.status);
      s = await r.json();
    } catch (e) { setTimeout(poll, 3000); return; }
    const pct = Math.round(100 * s.progress);
    fill.style.width = pct + "%";
    bar.setAttribute("aria-valuenow", pct);
    document.getElementById("percent").textContent = pct;
    document.getElementById("stage").textContent = s.stage;
    document.getElementById("status").textContent = s.status;
    if (s.status === "done" || s.status === "failed" || s.status === "cancelled") {
      window.location.replace(card.dataset.pageUrl);
      return;
    }
    setTimeout(poll, 1000);
  }
  poll();
})();
