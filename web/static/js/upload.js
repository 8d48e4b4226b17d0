// Drag-and-drop upload with one progress bar and one clear answer per file.
import { csrfToken } from "./csrf.js";

function describeAnswer(status, body) {
  if (status === 201 && body.sheets && body.sheets.length) {
    const ids = body.sheets.map((s) => `#${s.id}`).join(", ");
    return { ok: true, text: `added as sheet${body.sheets.length > 1 ? "s" : ""} ${ids}` };
  }
  const refused = body && body.refused && body.refused[0];
  return { ok: false, text: refused ? refused.reason : (body && body.detail) || `refused (HTTP ${status})` };
}

function uploadOne(url, file, row) {
  const bar = row.querySelector("progress");
  const result = row.querySelector(".result");
  return new Promise((resolve) => {
    const form = new FormData();
    form.append("files", file, file.name);
    const request = new XMLHttpRequest();
    request.open("POST", url);
    request.setRequestHeader("X-CSRF-Token", csrfToken());
    request.upload.addEventListener("progress", (event) => {
      if (event.lengthComputable) bar.value = (event.loaded / event.total) * 90;
    });
    request.addEventListener("load", () => {
      let body = {};
      try { body = JSON.parse(request.responseText); } catch { body = {}; }
      const answer = describeAnswer(request.status, body);
      bar.value = 100;
      result.textContent = answer.text;
      result.classList.add(answer.ok ? "ok" : "error");
      resolve(answer.ok);
    });
    request.addEventListener("error", () => {
      result.textContent = "network error: the file was not stored";
      result.classList.add("error");
      resolve(false);
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
  let accepted = 0;
  for (const [file, row] of rows) {
    // One at a time: the server decodes and tiles each scan, so parallel uploads would only queue there.
    if (await uploadOne(url, file, row)) accepted += 1;
  }
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
