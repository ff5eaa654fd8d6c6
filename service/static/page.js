// The page's only script: send the dropped file to /v1/reports and /v1/analyses.
"use strict";

(function () {
  const form = document.getElementById("upload");
  const drop = document.getElementById("drop");
  const input = document.getElementById("file");
  const chosen = document.getElementById("chosen");
  const button = document.getElementById("analyse");
  const status = document.getElementById("status");
  const image = document.getElementById("report");
  const table = document.getElementById("features");
  let file = null;

  function say(text, isError) {
    status.textContent = text;
    status.className = isError ? "error" : "";
  }

  function choose(picked) {
    file = picked || null;
    chosen.textContent = file ? file.name + " (" + file.size + " bytes)" : "";
    button.disabled = !file;
  }

  input.addEventListener("change", function () { choose(input.files[0]); });
  drop.addEventListener("dragover", function (event) {
    event.preventDefault();
    drop.classList.add("over");
  });
  drop.addEventListener("dragleave", function () { drop.classList.remove("over"); });
  drop.addEventListener("drop", function (event) {
    event.preventDefault();
    drop.classList.remove("over");
    choose(event.dataTransfer.files[0]);
  });

  function body() {
    const data = new FormData();
    data.append("file", file, file.name);
    const rate = document.getElementById("rate").value.trim();
    const unit = document.getElementById("unit").value.trim();
    const isCsv = /\.(csv|txt)$/i.test(file.name);
    if (rate && (isCsv || /\.npy$/i.test(file.name))) { data.append("sampling_rate_hz", rate); }
    if (unit && isCsv) { data.append("unit", unit); }
    return data;
  }

  function headers(accept) {
    const result = { "Accept": accept };
    const key = document.getElementById("key").value.trim();
    if (key) { result["Authorization"] = "Bearer " + key; }
    return result;
  }

  async function problemText(response) {
    try {
      const problem = await response.json();
      const fields = (problem.errors || []).map(function (e) { return e.field + ": " + e.detail; });
      return (problem.detail || problem.title) + (fields.length ? " " + fields.join("; ") : "");
    } catch (ignored) {
      return "HTTP " + response.status;
    }
  }

  function cell(row, text, numeric) {
    const td = document.createElement("td");
    td.textContent = text;
    if (numeric) { td.className = "num"; }
    row.appendChild(td);
  }

  function fill(analysis) {
    const tbody = table.querySelector("tbody");
    tbody.replaceChildren();
    analysis.feature_vector.features.forEach(function (f) {
      const row = document.createElement("tr");
      cell(row, f.name, false);
      cell(row, f.value === null ? "-" : Number(f.value).toPrecision(4), true);
      cell(row, f.unit || "", false);
      cell(row, Number(f.confidence).toFixed(2), true);
      cell(row, f.reason || "", false);
      tbody.appendChild(row);
    });
    table.hidden = false;
    document.getElementById("notice").textContent = analysis.notice;
  }

  form.addEventListener("submit", async function (event) {
    event.preventDefault();
    if (!file) { return; }
    button.disabled = true;
    say("Analysing " + file.name + " ...", false);
    try {
      const [report, analysis] = await Promise.all([
        fetch("/v1/reports", { method: "POST", body: body(), headers: headers("image/png") }),
        fetch("/v1/analyses", { method: "POST", body: body(), headers: headers("application/json") }),
      ]);
      if (!report.ok) { throw new Error(await problemText(report)); }
      if (!analysis.ok) { throw new Error(await problemText(analysis)); }
      const blob = await report.blob();
      if (image.src) { URL.revokeObjectURL(image.src); }
      image.src = URL.createObjectURL(blob);
      image.hidden = false;
      fill(await analysis.json());
      await image.decode();
      say("Done: " + file.name, false);
      document.body.dataset.state = "done";
    } catch (error) {
      say(error.message, true);
      document.body.dataset.state = "error";
    } finally {
      button.disabled = false;
    }
  });
})();
