// The page's only script: send the dropped file to /v1/reports and /v1/analyses, or a night
// to /v1/jobs (progress polled from /v1/jobs/{id}, then its picture and summary); the demo
// evening (/static/demo.json) goes the way of a short file.
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
  const demo = document.getElementById("demo");
  const job = document.getElementById("job");
  const progress = document.getElementById("progress");
  const progressText = document.getElementById("progress-text");
  const nightResult = document.getElementById("night-result");
  const nightImage = document.getElementById("night-report");
  const nightTable = document.getElementById("night-summary");
  //: How often a running job is asked for its progress (ms).
  const POLL_MS = 500;
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

  function rows(tbody, values) {
    tbody.replaceChildren();
    values.forEach(function (f) {
      const row = document.createElement("tr");
      cell(row, f.name, false);
      cell(row, f.value === null ? "-" : Number(f.value).toPrecision(4), true);
      cell(row, f.unit || "", false);
      cell(row, Number(f.confidence).toFixed(2), true);
      cell(row, f.reason || "", false);
      tbody.appendChild(row);
    });
  }

  function fill(analysis) {
    rows(table.querySelector("tbody"), analysis.feature_vector.features);
    table.hidden = false;
    document.getElementById("notice").textContent = analysis.notice;
  }

  async function show(img, response) {
    const blob = await response.blob();
    if (img.src) { URL.revokeObjectURL(img.src); }
    img.src = URL.createObjectURL(blob);
    img.hidden = false;
  }

  // A short recording: its report image and feature table, from one body maker.
  async function analyse(makeBody, contentType) {
    const send = function (path, accept) {
      const head = headers(accept);
      if (contentType) { head["Content-Type"] = contentType; }
      return fetch(path, { method: "POST", body: makeBody(), headers: head });
    };
    const [report, analysis] = await Promise.all([
      send("/v1/reports", "image/png"), send("/v1/analyses", "application/json"),
    ]);
    if (!analysis.ok) { return analysis; }
    if (!report.ok) { throw new Error(await problemText(report)); }
    nightResult.hidden = true;
    job.hidden = true;
    await show(image, report);
    fill(await analysis.json());
    await image.decode();
    return null;
  }

  // Too long for one analysis: the body limit (413) or the sample cap (422 naming it).
  async function tooLong(response) {
    if (response.status === 413) { return true; }
    if (response.status !== 422) { return false; }
    try {
      const problem = await response.clone().json();
      return (problem.errors || []).some(function (e) { return /at most \d+ samples/.test(e.detail); });
    } catch (ignored) {
      return false;
    }
  }

  function wait(ms) { return new Promise(function (resolve) { setTimeout(resolve, ms); }); }

  function showProgress(doc) {
    progress.value = doc.progress;
    progressText.textContent = doc.windows_total === null
      ? doc.status
      : doc.status + ": " + doc.windows_done + " of " + doc.windows_total + " windows";
  }

  // A night: queue it, follow its progress, then its picture and summary.
  async function night() {
    const queued = await fetch("/v1/jobs", { method: "POST", body: body(),
                                             headers: headers("application/json") });
    if (!queued.ok) { throw new Error(await problemText(queued)); }
    let doc = await queued.json();
    const where = "/v1/jobs/" + encodeURIComponent(doc.id);
    job.hidden = false;
    showProgress(doc);
    while (doc.status === "queued" || doc.status === "running") {
      await wait(POLL_MS);
      const polled = await fetch(where, { headers: headers("application/json") });
      if (!polled.ok) { throw new Error(await problemText(polled)); }
      doc = await polled.json();
      showProgress(doc);
    }
    if (doc.status !== "succeeded") {
      const why = doc.problem ? " " + (doc.problem.detail || doc.problem.title) : "";
      throw new Error("The night job ended " + doc.status + "." + why);
    }
    const [picture, result] = await Promise.all([
      fetch(where + "/report", { headers: headers("image/png") }),
      fetch(where + "/result", { headers: headers("application/json") }),
    ]);
    if (!picture.ok) { throw new Error(await problemText(picture)); }
    if (!result.ok) { throw new Error(await problemText(result)); }
    image.hidden = true;
    table.hidden = true;
    await show(nightImage, picture);
    const summary = await result.json();
    rows(nightTable.querySelector("tbody"), summary.summary.measures);
    document.getElementById("night-notice").textContent = summary.notice;
    document.getElementById("notice").textContent = summary.notice;
    nightResult.hidden = false;
    await nightImage.decode();
  }

  async function run(name, work) {
    button.disabled = true;
    demo.disabled = true;
    document.body.dataset.state = "";
    say("Analysing " + name + " ...", false);
    try {
      await work();
      say("Done: " + name, false);
      document.body.dataset.state = "done";
    } catch (error) {
      say(error.message, true);
      document.body.dataset.state = "error";
    } finally {
      button.disabled = !file;
      demo.disabled = false;
    }
  }

  form.addEventListener("submit", function (event) {
    event.preventDefault();
    if (!file) { return; }
    const asNight = document.getElementById("night").checked || /\.(edf|bdf)$/i.test(file.name);
    run(file.name, async function () {
      if (asNight) { return night(); }
      const refused = await analyse(body, null);
      if (refused === null) { return; }
      if (!(await tooLong(refused))) { throw new Error(await problemText(refused)); }
      say(file.name + " is too long for one analysis: queued as a night ...", false);
      return night();
    });
  });

  demo.addEventListener("click", function () {
    run("the demo evening", async function () {
      const got = await fetch("/static/demo.json");
      if (!got.ok) { throw new Error(await problemText(got)); }
      const text = await got.text();
      const refused = await analyse(function () { return text; }, "application/json");
      if (refused !== null) { throw new Error(await problemText(refused)); }
    });
  });
})();
