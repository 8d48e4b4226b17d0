// Drag-and-drop upload with one progress bar and one clear answer per file. The bar shows the transfer (first
// 40 %), then the server's decoding and tiling, which run as a background job once the original is stored.
import { csrfToken } from "./csrf.js";

const TRANSFER_SHARE = 40;
const POLL_MS = 400;

function sheetsText(ids) {
  return `added as sheet${ids.length > 1 ? "s" : ""} ${ids.map((id) => `#${id}`).join(", ")}`;
}

function refusal(status, body) {
  const refused = body && body.refused && body.refused[0];
  return refused ? refused.reason : (body && body.detail) || `refused (HTTP ${status})`;
}

async function followJob(jobId, bar, result) {
  for (;;) {
    const response = await fetch(`/api/v1/jobs/${jobId}`, { headers: { Accept: "application/json" } });
    const job = response.ok ? await response.json() : { status: "failed", error: `HTTP ${response.status}` };
    bar.value = TRANSFER_SHARE + (100 - TRANSFER_SHARE) * (job.progress || 0);
    if (job.status === "succeeded") return { ok: true, text: sheetsText(job.result.sheet_ids) };
    if (job.status === "failed") return { ok: false, text: job.error || "the file could not be read" };
    result.textContent = job.message || "waiting for a worker…";
    await new Promise((resolve) => { setTimeout(resolve, POLL_MS); });
  }
}

function finish(bar, result, answer) {
  bar.value = 100;
  result.textContent = answer.text;
  result.classList.add(answer.ok ? "ok" : "error");
  return answer.ok;
}

// Resolves once the file is transferred, with { done }: a promise of its final answer (decoding goes on meanwhile;
// a bare promise would be adopted by the outer one and make the caller wait for the job).
function uploadOne(url, file, row) {
  const bar = row.querySelector("progress");
  const result = row.querySelector(".result");
  return new Promise((resolve) => {
    const form = new FormData();
    form.append("files", file, file.name);
    const request = new XMLHttpRequest();
    request.open("POST", `${url}?background=true`);
    request.setRequestHeader("X-CSRF-Token", csrfToken());
    request.upload.addEventListener("progress", (event) => {
      if (event.lengthComputable) bar.value = (event.loaded / event.total) * TRANSFER_SHARE;
    });
    request.addEventListener("load", () => {
      let body = {};
      try { body = JSON.parse(request.responseText); } catch { body = {}; }
      const queued = request.status === 202 && body.queued && body.queued[0];
      if (!queued) { resolve({ done: Promise.resolve(finish(bar, result, { ok: false, text: refusal(request.status, body) })) }); return; }
      bar.value = TRANSFER_SHARE;
      result.textContent = "stored; decoding and tiling…";
      resolve({ done: followJob(queued.job_id, bar, result).then((answer) => finish(bar, result, answer)) });
    });
    request.addEventListener("error", () => {
      resolve({ done: Promise.resolve(finish(bar, result, { ok: false, text: "network error: the file was not stored" })) });
    });
    request.send(form);
  });
}

function addRow(list, file) {
  const row = document.createElement("li");
  const label = document.createElement("span");
  label.textContent = `${file.name} (${Math.ceil(file.size / 1024)} KiB)`;
  const right = document.createElement("span");
  right.innerHTML = '<progress max="100" value="0"></progress><span class="result"></span>';
  right.querySelector("progress").setAttribute("aria-label", `progress of ${file.name}`);
  row.append(label, right);
  list.append(row);
  return row;
}

async function uploadAll(zone, files) {
  const list = document.querySelector("[data-upload-list]");
  const url = zone.dataset.uploadUrl;
  const rows = Array.from(files).map((file) => [file, addRow(list, file)]);
  const outcomes = [];
  for (const [file, row] of rows) {
    // Transfers one at a time (they share the line); the server's jobs decode and tile in parallel meanwhile.
    outcomes.push((await uploadOne(url, file, row)).done);
  }
  const accepted = (await Promise.all(outcomes)).filter(Boolean).length;
  if (accepted) refreshGrid();
}

async function refreshGrid() {
  const grid = document.getElementById("sheet-grid");
  if (!grid) return;
  const response = await fetch(window.location.href, { headers: { "X-Fragment": "1" } });
  if (response.ok) {
    const holder = document.createElement("div");
    holder.innerHTML = await response.text();
    const fresh = holder.querySelector("#sheet-grid");
    if (fresh) grid.replaceWith(fresh);
  }
}

for (const zone of document.querySelectorAll("[data-upload-zone]")) {
  const input = zone.querySelector("[data-upload-input]");
  input.addEventListener("change", () => { uploadAll(zone, input.files); input.value = ""; });
  zone.addEventListener("dragover", (event) => { event.preventDefault(); zone.classList.add("over"); });
  zone.addEventListener("dragleave", () => zone.classList.remove("over"));
  zone.addEventListener("drop", (event) => {
    event.preventDefault();
    zone.classList.remove("over");
    uploadAll(zone, event.dataTransfer.files);
  });
}
