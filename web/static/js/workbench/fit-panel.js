// The Fit panel: fit a model family to the chosen trace (or ask which family the data support), then read the
// equation (typeset and as text), the coefficients with their standard errors, the statistics, the residual plot
// with the stretch beyond the traced range shaded, and see the curve and its bands on the scan.
import { ApiError, getJson, postJson, query } from "./api.js";
import { fitLayer } from "./fit-layer.js";
import { plot } from "./plot.js";
import { typesetInto } from "./typeset.js";

const STATS = [
  ["n", "samples"], ["dof", "degrees of freedom"], ["residual_sd", "residual std. deviation (value units)"],
  ["reduced_chi_square", "reduced χ² (residuals in units of each sample's uncertainty)"], ["r_squared", "R²"],
  ["aicc", "AICc"], ["bic", "BIC"], ["cv_rmse", "cross-validation RMSE"], ["condition_number", "condition number"],
];
const NEEDS = { polynomial: ["degree"], fourier: ["degree", "period"], interpolation: ["degree"] };

const number = (value) => {
  if (value === null || value === undefined) return "–";
  if (typeof value !== "number") return String(value);
  if (Number.isInteger(value)) return String(value);
  return Math.abs(value) >= 1e5 || (Math.abs(value) < 1e-3 && value !== 0) ? value.toExponential(4) : value.toPrecision(6);
};

function coefficientRows(values, errors) {
  if (Array.isArray(values)) return values.map((value, k) => [`c${k} (x^${k})`, value, errors ? errors[k] : null]);
  return Object.entries(values).map(([name, value]) => [name, value, errors ? errors[name] : null]);
}

function cellText(value) {
  if (Array.isArray(value)) return `${value.length} values`;
  return number(value);
}

export function createFitPanel(panel, wb) {
  const traceSelect = panel.querySelector("[data-fit-trace]");
  const form = panel.querySelector("[data-fit-form]");
  const state = panel.querySelector("[data-fit-state]");
  const result = panel.querySelector("[data-fit-result]");
  const list = panel.querySelector("[data-fit-list]");
  const suggestions = panel.querySelector("[data-suggestions]");
  const showBands = panel.querySelector("[data-show-bands]");
  let curve = null;
  let shown = null;

  wb.overlay.addLayer(fitLayer({ curve: () => curve, visible: () => showBands.checked }));

  const traceId = () => Number(traceSelect.value) || null;

  function fillTraces() {
    const keep = traceSelect.value || (wb.store.selectedId ? String(wb.store.selectedId) : "");
    traceSelect.replaceChildren(...wb.store.all().map((entry) => new Option(`${entry.data.name} (#${entry.data.id})`, String(entry.data.id))));
    if (keep && [...traceSelect.options].some((o) => o.value === keep)) traceSelect.value = keep;
  }

  function showOptions() {
    const needs = NEEDS[form.elements.family.value] || [];
    for (const label of form.querySelectorAll("[data-fit-option]")) label.hidden = !needs.includes(label.dataset.fitOption);
  }

  function requestBody() {
    const family = form.elements.family.value;
    const body = { family };
    const needs = NEEDS[family] || [];
    if (needs.includes("degree") && form.elements.degree.value !== "") body.degree = Number(form.elements.degree.value);
    if (needs.includes("period") && form.elements.period.value !== "") body.period = Number(form.elements.period.value);
    return body;
  }

  function renderFit(fit) {
    shown = fit;
    result.hidden = false;
    typesetInto(panel.querySelector("[data-equation-math]"), fit.equation.latex || "", fit.equation.text || "");
    panel.querySelector("[data-equation-text]").textContent = fit.equation.text || "";
    const body = panel.querySelector("[data-coefficients] tbody");
    body.replaceChildren(...coefficientRows(fit.coefficients, fit.standard_errors).map(([name, value, error]) => {
      const row = document.createElement("tr");
      for (const [text, cls] of [[name, ""], [cellText(value), "num"], [cellText(error), "num"]]) {
        const td = document.createElement("td");
        td.textContent = text;
        td.className = cls;
        row.append(td);
      }
      return row;
    }));
    const stats = panel.querySelector("[data-fit-stats]");
    stats.replaceChildren();
    for (const [key, words] of STATS) {
      if (!(key in fit.stats)) continue;
      if (key === "reduced_chi_square" && fit.stats[key] === null) continue; // unweighted fit: no uncertainties
      // Fits stored before reduced_chi_square existed may hold a weighted, unitless figure under residual_sd.
      if (key === "residual_sd" && !("reduced_chi_square" in fit.stats)) continue;
      const dt = document.createElement("dt");
      dt.textContent = words;
      const dd = document.createElement("dd");
      dd.textContent = number(fit.stats[key]);
      stats.append(dt, dd);
    }
    const warnings = [...fit.warnings];
    if (fit.stale) warnings.unshift("This fit is stale: the trace or calibration changed and refitting failed.");
    const box = panel.querySelector("[data-fit-warnings]");
    box.hidden = !warnings.length;
    box.textContent = warnings.join(" ");
  }

  function renderResiduals() {
    const target = panel.querySelector("[data-residual-plot]");
    if (!curve) { target.replaceChildren(); return; }
    const sd = curve.residual_sd || 0;
    const x = curve.residuals.map((r) => r.x);
    const xRange = [Math.min(curve.x[0], ...x), Math.max(curve.x[curve.x.length - 1], ...x)];
    plot(target, {
      series: [{ x, y: curve.residuals.map((r) => r.residual), kind: "points", colour: "#1f5f7a" }],
      guides: [{ y: 0, colour: "#1b2630" }, { y: 2 * sd, colour: "#868e96", dash: "4 3" }, { y: -2 * sd, colour: "#868e96", dash: "4 3" }],
      shade: [
        { from: xRange[0], to: curve.domain[0], colour: "rgba(245,159,0,0.25)", title: "outside the traced range" },
        { from: curve.domain[1], to: xRange[1], colour: "rgba(245,159,0,0.25)", title: "outside the traced range" },
      ],
      labels: { x: wb.store.get(curve.trace_id) ? `x [${wb.store.get(curve.trace_id).data.x_unit || "-"}]` : "x", y: "residual (dashed: ±2 sd)" },
      xRange,
    });
  }

  // The form names the shown fit's model, so "Fit" repeats it rather than whatever the form held before.
  function formFromFit(fit) {
    form.elements.family.value = fit.family;
    if (fit.options.degree !== undefined) form.elements.degree.value = fit.options.degree;
    if (fit.family === "fourier") form.elements.period.value = fit.options.period ?? "";
    showOptions();
  }

  async function showFit(fit) {
    formFromFit(fit);
    renderFit(fit);
    try {
      curve = await getJson(`/api/v1/fits/${fit.id}/curve?${query({ count: 400 })}`);
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      curve = null;
      state.textContent = `Curve not drawn: ${error.message}`;
    }
    renderResiduals();
    wb.overlay.requestDraw();
    wb.bus.dispatchEvent(new CustomEvent("fits", { detail: { traceId: fit.trace_id } }));
  }

  async function refreshList() {
    const id = traceId();
    list.replaceChildren();
    if (!id) return [];
    const fits = await getJson(`/api/v1/traces/${id}/fits`);
    for (const fit of fits) {
      const item = document.createElement("li");
      const button = document.createElement("button");
      button.type = "button";
      button.className = "link";
      button.textContent = `#${fit.id} ${fit.family}: ${fit.equation.text || "(no closed form)"}`;
      button.setAttribute("aria-pressed", String(Boolean(shown && shown.id === fit.id)));
      button.addEventListener("click", () => showFit(fit));
      item.append(button);
      if (fit.stale) item.append(" ", Object.assign(document.createElement("span"), { className: "badge warn", textContent: "stale" }));
      list.append(item);
    }
    return fits;
  }

  async function fitNow(event) {
    if (event) event.preventDefault();
    const id = traceId();
    if (!id) { state.textContent = "Choose a trace first."; return; }
    state.textContent = "Fitting…";
    try {
      await wb.autosave.flush(id);
      const fit = await postJson(`/api/v1/traces/${id}/fits`, requestBody());
      state.textContent = `Fit #${fit.id} stored`;
      await showFit(fit);
      await refreshList();
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      state.textContent = `Not fitted: ${error.message}`;
    }
  }

  async function suggest() {
    const id = traceId();
    if (!id) { state.textContent = "Choose a trace first."; return; }
    state.textContent = "Comparing models…";
    try {
      const period = form.elements.period.value === "" ? undefined : Number(form.elements.period.value);
      const answer = await postJson(`/api/v1/traces/${id}/fits/suggest`, period ? { period } : {});
      renderSuggestions(answer);
      state.textContent = answer.recommended ? `Suggested: ${answer.recommended}` : "No model stands out";
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      state.textContent = `No suggestion: ${error.message}`;
    }
  }

  function renderSuggestions(answer) {
    const table = document.createElement("table");
    table.className = "wb-table";
    table.innerHTML = '<caption>Candidate models (lower AICc and cross-validation error are better)</caption><thead><tr><th scope="col">model</th><th scope="col" class="num">k</th><th scope="col" class="num">AICc</th><th scope="col" class="num">CV RMSE</th><th scope="col"><span class="sr-only">Use</span></th></tr></thead>';
    const body = document.createElement("tbody");
    for (const candidate of answer.candidates) {
      const row = document.createElement("tr");
      if (candidate.recommended) row.className = "wb-recommended";
      for (const [text, cls] of [[candidate.label + (candidate.recommended ? " ★" : ""), ""], [String(candidate.parameter_count), "num"], [number(candidate.aicc), "num"], [number(candidate.cv_rmse), "num"]]) {
        const td = document.createElement("td");
        td.textContent = text;
        td.className = cls;
        if (!cls && candidate.reason) td.title = candidate.reason;
        row.append(td);
      }
      const use = document.createElement("button");
      use.type = "button";
      use.textContent = "Use";
      use.setAttribute("aria-label", `Fit ${candidate.label}`);
      use.addEventListener("click", () => {
        form.elements.family.value = candidate.family;
        if (candidate.options.degree !== undefined) form.elements.degree.value = candidate.options.degree;
        // A period the suggestion estimated (null) is estimated again, not taken from an earlier entry.
        if (candidate.options.period !== undefined) form.elements.period.value = candidate.options.period ?? "";
        showOptions();
        fitNow();
      });
      const td = document.createElement("td");
      td.append(use);
      row.append(td);
      body.append(row);
    }
    table.append(body);
    suggestions.replaceChildren(table);
  }

  async function traceChanged() {
    curve = null;
    shown = null;
    result.hidden = true;
    suggestions.replaceChildren();
    wb.overlay.requestDraw();
    const fits = await refreshList();
    if (fits.length) await showFit(fits[fits.length - 1]);
  }

  form.elements.family.addEventListener("change", showOptions);
  form.addEventListener("submit", fitNow);
  panel.querySelector('[data-action="suggest"]').addEventListener("click", suggest);
  panel.querySelector('[data-action="copy-equation"]').addEventListener("click", async () => {
    const text = panel.querySelector("[data-equation-text]").textContent;
    try { await navigator.clipboard.writeText(text); state.textContent = "Equation copied"; } catch { state.textContent = "Copy is not allowed here; select the text instead"; }
  });
  showBands.addEventListener("change", () => wb.overlay.requestDraw());
  traceSelect.addEventListener("change", traceChanged);
  wb.bus.addEventListener("traces", (event) => {
    const before = traceSelect.value;
    fillTraces();
    if (traceSelect.value !== before || (event.detail && Number(event.detail.id) === traceId())) traceChanged();
  });
  wb.bus.addEventListener("selection", (event) => {
    if (event.detail.id && String(event.detail.id) !== traceSelect.value) { traceSelect.value = String(event.detail.id); traceChanged(); }
  });
  if (!wb.canEdit) for (const control of form.elements) if (control.type === "submit") control.disabled = true;
  showOptions();
  fillTraces();
  return { fitNow, get curve() { return curve; } };
}
