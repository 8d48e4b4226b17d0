// The Data panel: the digitized values of a trace in chart units (paged table with their uncertainty), resampling
// onto a uniform grid with a preview plot and the CSV download, and per-period summaries.
import { ApiError, getJson, query } from "./api.js";
import { plot } from "./plot.js";

const PAGE = 100;

const show = (value, digits = 5) => {
  if (value === null || value === undefined || Number.isNaN(value)) return "";
  return Number.isInteger(value) && Math.abs(value) < 1e6 ? String(value) : Number(value).toPrecision(digits);
};

function parseCsv(text) {
  const lines = text.trim().split(/\r?\n/);
  const header = lines[0].split(",");
  const yColumn = header.length - 2;
  return lines.slice(1).map((line) => {
    const cells = line.split(",");
    return [Number(cells[0]), cells[yColumn] === "" ? null : Number(cells[yColumn])];
  });
}

export function createDataPanel(panel, wb) {
  const traceSelect = panel.querySelector("[data-data-trace]");
  const samplesBody = panel.querySelector("[data-samples] tbody");
  const samplesInfo = panel.querySelector("[data-samples-info]");
  const resample = panel.querySelector("[data-resample]");
  const csvLink = panel.querySelector("[data-csv-link]");
  const resampleState = panel.querySelector("[data-resample-state]");
  const summary = panel.querySelector("[data-summary]");
  let page = 0;

  const entry = () => wb.store.get(Number(traceSelect.value));

  function fillTraces() {
    const keep = traceSelect.value || (wb.store.selectedId ? String(wb.store.selectedId) : "");
    traceSelect.replaceChildren(...wb.store.all().map((e) => new Option(`${e.data.name} (#${e.data.id})`, String(e.data.id))));
    if (keep && [...traceSelect.options].some((o) => o.value === keep)) traceSelect.value = keep;
  }

  function renderSamples() {
    const current = entry();
    samplesBody.replaceChildren();
    if (!current) { samplesInfo.textContent = "No trace."; return; }
    const { samples, uncertainty, x_unit: xUnit, y_unit: yUnit, name } = current.data;
    panel.querySelector("[data-samples-x]").textContent = `x${xUnit ? ` [${xUnit}]` : ""}`;
    panel.querySelector("[data-samples-y]").textContent = `${name}${yUnit ? ` [${yUnit}]` : ""}`;
    if (!samples) { samplesInfo.textContent = "Calibrate the sheet to read values."; return; }
    const pages = Math.max(1, Math.ceil(samples.length / PAGE));
    page = Math.min(Math.max(page, 0), pages - 1);
    const rows = samples.slice(page * PAGE, (page + 1) * PAGE).map(([x, y], k) => {
      const row = document.createElement("tr");
      const sigma = uncertainty && uncertainty[page * PAGE + k] ? uncertainty[page * PAGE + k][1] : null;
      for (const value of [x, y, sigma]) {
        const td = document.createElement("td");
        td.className = "num";
        td.textContent = show(value, value === sigma ? 2 : 6);
        row.append(td);
      }
      return row;
    });
    samplesBody.append(...rows);
    samplesInfo.textContent = `rows ${page * PAGE + 1}–${Math.min((page + 1) * PAGE, samples.length)} of ${samples.length.toLocaleString("en")} (page ${page + 1} of ${pages})`;
  }

  function resampleParams() {
    const f = resample.elements;
    const params = { method: f.method.value, start: f.start.value, stop: f.stop.value, max_gap: f.max_gap.value };
    if (f.count.value !== "") params.count = f.count.value;
    else params.step = f.step.value;
    if (f.method.value === "fit") params.fit_id = f.fit_id.value;
    return params;
  }

  function updateLink() {
    const current = entry();
    const ready = current && current.data.samples && (resample.elements.method.value !== "fit" || resample.elements.fit_id.value);
    csvLink.href = ready ? `/api/v1/traces/${current.data.id}/resampled.csv?${query(resampleParams())}` : "#";
    csvLink.setAttribute("aria-disabled", String(!ready));
    panel.querySelector("[data-resample-fit]").hidden = resample.elements.method.value !== "fit";
  }

  async function fillFits() {
    const current = entry();
    const select = resample.elements.fit_id;
    select.replaceChildren();
    if (!current) return;
    const fits = await getJson(`/api/v1/traces/${current.data.id}/fits`);
    select.append(...fits.map((fit) => new Option(`#${fit.id} ${fit.family}`, String(fit.id))));
    if (fits.length) select.value = String(fits[fits.length - 1].id);
    updateLink();
  }

  async function previewResample(event) {
    event.preventDefault();
    updateLink();
    if (csvLink.getAttribute("aria-disabled") === "true") { resampleState.textContent = "Calibrate and choose a fit first."; return; }
    resampleState.textContent = "Resampling…";
    try {
      const response = await fetch(csvLink.href, { credentials: "same-origin" });
      const text = await response.text();
      if (!response.ok) throw new ApiError(response.status, JSON.parse(text).detail || `HTTP ${response.status}`);
      const rows = parseCsv(text);
      const current = entry();
      plot(panel.querySelector("[data-resample-plot]"), {
        series: [
          { x: current.data.samples.map((s) => s[0]), y: current.data.samples.map((s) => s[1]), kind: "points", colour: "#adb5bd" },
          { x: rows.map((r) => r[0]), y: rows.map((r) => r[1]), kind: "line", colour: "#1f5f7a" },
        ],
        labels: { x: `x [${current.data.x_unit || "-"}]`, y: `${current.data.name} (grey: samples)` },
      });
      resampleState.textContent = `${rows.length.toLocaleString("en")} rows`;
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      resampleState.textContent = `No preview: ${error.message}`;
    }
  }

  async function summarise(event) {
    event.preventDefault();
    const current = entry();
    const target = panel.querySelector("[data-summary-table]");
    if (!current) return;
    try {
      const answer = await getJson(`/api/v1/traces/${current.data.id}/summary?${query({ period: summary.elements.period.value, threshold: summary.elements.threshold.value })}`);
      const table = document.createElement("table");
      table.className = "wb-table";
      const unit = answer.unit ? ` [${answer.unit}]` : "";
      const withThreshold = summary.elements.threshold.value !== "";
      const head = ["from h", `mean${unit}`, `min${unit}`, `max${unit}`, "samples"];
      if (withThreshold) head.push("hours above");
      table.innerHTML = `<thead><tr>${head.map((h) => `<th scope="col" class="num">${h}</th>`).join("")}</tr></thead>`;
      const body = document.createElement("tbody");
      for (const period of answer.periods) {
        const row = document.createElement("tr");
        const cells = [period.start, period.mean, period.minimum, period.maximum, period.sample_count];
        if (withThreshold) cells.push(period.time_above);
        for (const value of cells) {
          const td = document.createElement("td");
          td.className = "num";
          td.textContent = show(value);
          row.append(td);
        }
        body.append(row);
      }
      table.append(body);
      target.replaceChildren(table);
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      target.textContent = `No summary: ${error.message}`;
    }
  }

  function traceChanged() {
    page = 0;
    renderSamples();
    fillFits();
    updateLink();
  }

  for (const button of panel.querySelectorAll("[data-samples-page]")) {
    button.addEventListener("click", () => { page += Number(button.dataset.samplesPage); renderSamples(); });
  }
  traceSelect.addEventListener("change", traceChanged);
  resample.addEventListener("input", updateLink);
  resample.addEventListener("submit", previewResample);
  csvLink.addEventListener("click", (event) => { if (csvLink.getAttribute("aria-disabled") === "true") event.preventDefault(); });
  summary.addEventListener("submit", summarise);
  wb.bus.addEventListener("traces", () => { fillTraces(); renderSamples(); updateLink(); });
  wb.bus.addEventListener("fits", () => fillFits());
  wb.bus.addEventListener("selection", (event) => {
    if (event.detail.id) { traceSelect.value = String(event.detail.id); traceChanged(); }
  });
  fillTraces();
  traceChanged();
}
