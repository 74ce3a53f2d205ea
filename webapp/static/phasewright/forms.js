// The submit forms: show the chosen printer's key limits and the material's data beside the choices,
// and let files be dropped onto the upload zone (the file input stays usable from the keyboard).
(function () {
  "use strict";
  const factsEl = document.getElementById("catalogue-facts");
  const facts = factsEl ? JSON.parse(factsEl.textContent) : null;

  function showFacts(kind) {
    const select = document.getElementById("id_" + kind);
    const target = document.getElementById(kind + "-facts");
    if (!facts || !select || !target) return;
    function render() {
      target.replaceChildren();
      (facts[kind][select.value] || []).forEach(function (row) {
        const dt = document.createElement("dt"); dt.textContent = row[0];
        const dd = document.createElement("dd"); dd.textContent = row[1];
        target.append(dt, dd);
      });
    }
    select.addEventListener("change", render);
    render();
  }
  showFacts("printer");
  showFacts("material");

  // Materials the chosen printer cannot print stay listed but cannot be chosen.
  const printerSelect = document.getElementById("id_printer");
  const materialSelect = document.getElementById("id_material");
  function limitMaterials() {
    if (!facts || !printerSelect || !materialSelect) return;
    const ok = facts.compatible[printerSelect.value] || [];
    Array.from(materialSelect.options).forEach(function (o) {
      o.disabled = !ok.includes(o.value);
      o.textContent = o.textContent.replace(/ \(not for this printer\)$/, "") + (o.disabled ? " (not for this printer)" : "");
    });
    if (materialSelect.selectedOptions.length && materialSelect.selectedOptions[0].disabled && ok.length) {
      materialSelect.value = ok[0];
      materialSelect.dispatchEvent(new Event("change"));
    }
  }
  if (printerSelect) printerSelect.addEventListener("change", limitMaterials);
  limitMaterials();

  const zone = document.getElementById("dropzone");
  if (!zone) return;
  const input = zone.querySelector("input[type=file]");
  const list = document.getElementById("file-list");
  function listFiles() {
    list.replaceChildren();
    Array.from(input.files).forEach(function (f) {
      const li = document.createElement("li");
      li.textContent = f.name + " · " + (f.size / 1048576).toFixed(f.size < 1048576 ? 2 : 1) + " MB";
      list.append(li);
    });
    const button = document.getElementById("submit-button");
    if (button) button.textContent = input.files.length > 1 ? "Upload and check " + input.files.length + " files" : "Upload and check";
  }
  input.addEventListener("change", listFiles);
  ["dragenter", "dragover"].forEach(function (type) {
    zone.addEventListener(type, function (e) { e.preventDefault(); zone.classList.add("dragging"); });
  });
  ["dragleave", "drop"].forEach(function (type) {
    zone.addEventListener(type, function (e) { e.preventDefault(); zone.classList.remove("dragging"); });
  });
  zone.addEventListener("drop", function (e) {
    if (!e.dataTransfer || !e.dataTransfer.files.length) return;
    const transfer = new DataTransfer();
    Array.from(input.files).concat(Array.from(e.dataTransfer.files)).forEach(f => transfer.items.add(f));
    input.files = transfer.files;
    listFiles();
  });
})();
