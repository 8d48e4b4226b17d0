// The Calibrate panel: a draft calibration fitted live on the server as points are placed and typed (residuals,
// the chosen model and warnings update within a moment), saved with If-Match so a calibration someone else
// saved meanwhile is never overwritten.
import { ApiError, getJson, postJson, request } from "./api.js";
import { draftGeometry, formFromSpec, specFromForm } from "./calibration-form.js";
import { bindGeometryPicks } from "./calibration-geometry.js";
import { calibrationLayer, RESIDUAL_EXAGGERATION } from "./calibration-layer.js";
import { createPointsTable } from "./calibration-points.js";
import { createSpecPicker } from "./chart-spec-picker.js";
import { bindSpecSave } from "./chart-spec-save.js";

const PREVIEW_DELAY_MS = 250;
const TRANSFORM_WORDS = {
  similarity: "shift, turn and one scale",
  affine: "shift, turn, two scales and shear",
  projective: "perspective",
  polynomial2: "second-order warp",
  circular: "circular chart geometry",
};

const fmt = (value, digits = 2) => (value === null || value === undefined ? "–" : Number(value).toFixed(digits));

export function createCalibratePanel(panel, wb) {
  const form = panel.querySelector("[data-cal-form]");
  const report = panel.querySelector("[data-cal-report]");
  const state = panel.querySelector("[data-cal-state]");
  const summary = panel.querySelector("[data-cal-summary]");
  const reason = panel.querySelector("[data-cal-reason]");
  const placeButton = panel.querySelector('[data-action="place-points"]');
  const templates = panel.querySelector("[data-cal-template]");
  let saved = wb.initial.calibration;
  let etag = saved ? `"calibration-${saved.sheet_id}-v${saved.version}"` : null;
  let preview = null;
  let previewSpec = null;
  let timer = null;
  let generation = 0;

  const table = createPointsTable({
    table: panel.querySelector("[data-points-table]"),
    viewer: wb.viewer,
    overlay: wb.overlay,
    onChange: () => schedulePreview(),
    canEdit: wb.canEdit,
  });
  table.placeTool.onLeave = () => placeButton.setAttribute("aria-pressed", "false");

  wb.overlay.addLayer(calibrationLayer({
    visible: () => wb.activeTab() === "calibrate",
    grid: () => (preview ? preview.grid : []),
    geometry: () => draftGeometry(form),
    points: () => table.points,
    residuals: () => (preview ? preview.residuals : []),
    selected: () => table.selected,
  }));

  function showKind() {
    const kind = form.kind.value;
    for (const section of form.querySelectorAll("[data-kind-section]")) {
      section.hidden = !section.dataset.kindSection.split(" ").includes(kind);
    }
    const circular = kind === "circular";
    panel.querySelector("[data-points-legend]").textContent = circular ? "Check points (optional)" : "Control points";
    panel.querySelector("[data-x-head]").textContent = circular ? "time h" : "x";
    panel.querySelector("[data-y-head]").textContent = circular ? "value" : "y";
  }

  function renderReport(message, kind = "") {
    report.replaceChildren();
    if (message) {
      const p = document.createElement("p");
      p.className = kind === "error" ? "notice error" : "wb-help";
      p.textContent = message;
      report.append(p);
      return;
    }
    if (!preview) return;
    const list = document.createElement("dl");
    list.className = "wb-stats";
    const rows = [
      ["Model", TRANSFORM_WORDS[preview.transform] || preview.transform || "–"],
      ["Points off by (RMS)", preview.rms_px === null ? "–" : `${fmt(preview.rms_px)} px`],
      ["Leave-one-out check", preview.loo_rms_px === null ? "needs a spare point" : `${fmt(preview.loo_rms_px)} px`],
    ];
    if (preview.rms_units) rows.push(["In chart units (x, y)", preview.rms_units.map((v) => fmt(v, 4)).join(", ")]);
    for (const [term, detail] of rows) {
      const dt = document.createElement("dt");
      dt.textContent = term;
      const dd = document.createElement("dd");
      dd.textContent = detail;
      list.append(dt, dd);
    }
    report.append(list);
    if (preview.residuals.length) {
      const note = document.createElement("p");
      note.className = "wb-help";
      note.textContent = `Orange arrows on the scan show each point's residual, drawn ${RESIDUAL_EXAGGERATION} times longer.`;
      report.append(note);
    }
    for (const warning of preview.warnings) {
      const p = document.createElement("p");
      p.className = "notice warn";
      p.textContent = warning;
      report.append(p);
    }
  }

  async function runPreview() {
    const draft = specFromForm(form, table.points);
    const mine = ++generation;
    if (draft.missing) {
      preview = null;
      previewSpec = null;
      table.setResiduals([]);
      renderReport(`To fit: ${draft.missing}.`);
      wb.overlay.requestDraw();
      return;
    }
    try {
      const answer = await postJson(`/api/v1/sheets/${wb.sheetId}/calibration/preview`, draft.spec);
      if (mine !== generation) return;
      preview = answer;
      previewSpec = draft.spec;
      table.setResiduals(answer.residuals);
      renderReport();
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      if (mine !== generation) return;
      preview = null;
      previewSpec = null;
      table.setResiduals([]);
      renderReport(error.message, "error");
    }
    wb.overlay.requestDraw();
  }

  function markDraft() {
    state.textContent = saved ? "Draft differs from the saved calibration" : "Not saved yet";
  }

  function schedulePreview() {
    clearTimeout(timer);
    markDraft();
    timer = setTimeout(runPreview, PREVIEW_DELAY_MS);
  }

  function describeSaved() {
    if (!saved) { summary.textContent = "This sheet is not calibrated yet."; return; }
    const rms = saved.rms_px === null ? "" : `, points off by ${fmt(saved.rms_px)} px RMS`;
    summary.textContent = `Saved as version ${saved.version}: ${saved.kind}${saved.transform ? `, ${TRANSFORM_WORDS[saved.transform] || saved.transform}` : ""}${rms}.`;
    reason.hidden = false;
  }

  async function save(event) {
    event.preventDefault();
    const draft = specFromForm(form, table.points);
    if (draft.missing) { renderReport(`Cannot save yet: ${draft.missing}.`, "error"); return; }
    const body = { ...draft.spec };
    if (saved && form.reason.value.trim()) body.reason = form.reason.value.trim();
    state.textContent = "Saving…";
    try {
      const answer = await request("PUT", `/api/v1/sheets/${wb.sheetId}/calibration`, { body, etag: saved ? etag : undefined });
      saved = answer.data;
      etag = answer.etag;
      form.reason.value = "";
      describeSaved();
      state.textContent = `Saved as version ${saved.version}`;
      wb.status.saving(`Calibration saved (version ${saved.version})`, "ok");
      wb.bus.dispatchEvent(new CustomEvent("calibration-saved", { detail: saved }));
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      if (error.status === 412) { conflict(body); return; }
      state.textContent = "";
      renderReport(`Not saved: ${error.message}`, "error");
    }
  }

  function conflict(mine) {
    state.textContent = "Not saved: someone else saved a calibration meanwhile";
    wb.conflicts.show({
      text: "Someone else saved a calibration of this sheet while you were drafting yours. Your draft is still in the form and nothing was overwritten.",
      copyLabel: "Keep my draft as a file",
      reload: async () => {
        const answer = await request("GET", `/api/v1/sheets/${wb.sheetId}/calibration`);
        saved = answer.data;
        etag = answer.etag;
        load(saved.spec);
        describeSaved();
        state.textContent = `Loaded version ${saved.version}`;
      },
      copy: () => downloadJson(mine, `sheet-${wb.sheetId}-calibration-draft.json`),
    });
  }

  // Fill the form from a calibration (or the part of one a chart spec gives); the chart start and the placed
  // points can be kept, since they belong to this sheet.
  function load(spec, { keepPoints = false, keepStart = false } = {}) {
    const start = form.start.value;
    const points = formFromSpec(form, spec);
    if (keepStart) form.start.value = start;
    if (!keepPoints) table.setPoints(points);
    showKind();
    runPreview();
  }

  async function offerTemplates() {
    const list = await getJson(`/api/v1/sheets/${wb.sheetId}/calibration-templates`);
    for (const item of list) {
      const option = document.createElement("option");
      option.value = String(item.sheet_id);
      option.textContent = `sheet #${item.sheet_id} ${item.filename} (${item.kind}, v${item.version})`;
      option.spec = item.spec;
      templates.append(option);
    }
    templates.addEventListener("change", () => {
      const option = templates.selectedOptions[0];
      if (option && option.spec) load(option.spec);
    });
  }

  function togglePlacing(force) {
    const on = force === undefined ? wb.viewer.tool !== table.placeTool : force;
    wb.viewer.setTool(on ? table.placeTool : null);
    wb.hint[on ? "show" : "clear"]("Click the scan to add a control point, or drag a point to move it. Esc ends.");
  }

  wb.bus.addEventListener("tool", (event) => {
    placeButton.setAttribute("aria-pressed", String(event.detail === table.placeTool));
  });
  placeButton.addEventListener("click", () => togglePlacing());
  panel.querySelector('[data-action="add-point-row"]').addEventListener("click", () => {
    const t = wb.viewer.transform();
    if (!t) return;
    const [u, v] = wb.viewer.toImage(t, wb.viewer.element.clientWidth / 2, wb.viewer.element.clientHeight / 2);
    table.addPoint(u, v);
  });
  form.addEventListener("input", (event) => { if (!event.target.closest("[data-points-table], [data-no-draft]")) schedulePreview(); });
  form.kind.addEventListener("change", () => { showKind(); schedulePreview(); });
  form.addEventListener("submit", save);
  bindGeometryPicks({ form, picker: wb.picker, onChange: schedulePreview, say: (text, kind) => renderReport(text, kind) });
  if (!wb.canEdit) for (const control of form.elements) control.disabled = true;

  showKind();
  if (saved) { load(saved.spec); describeSaved(); } else { renderReport("To fit: place at least two control points and type their values."); }
  offerTemplates();
  const drafts = {
    form,
    load: (spec, options) => { load(spec, options); markDraft(); },
    say: renderReport,
    changed: () => { showKind(); schedulePreview(); },
    draft: () => specFromForm(form, table.points),
    // What the form holds that a chart spec may not say (units, the mapping model).
    current: () => ({
      xUnit: form.x_unit.value.trim(),
      yUnit: form.y_unit.value.trim(),
      valueUnit: form.value_unit.value.trim(),
      transform: form.transform.value,
    }),
    focusSave: () => panel.querySelector("[data-cal-save]").focus(),
  };
  const specs = createSpecPicker(panel, wb, drafts);
  bindSpecSave(panel, wb, drafts, specs);

  return {
    togglePlacing,
    placeTool: table.placeTool,
    nudgePoint: (du, dv) => table.nudge(du, dv),
    removePoint: () => table.removeSelected(),
    save: () => form.requestSubmit(),
    // What the pointer read-out maps through: the saved calibration, else a draft that fitted, else nothing.
    probeSource: () => (previewSpec && (!saved || wb.activeTab() === "calibrate") ? previewSpec : saved ? "saved" : null),
    get saved() { return saved; },
  };
}

function downloadJson(data, filename) {
  const link = document.createElement("a");
  link.href = URL.createObjectURL(new Blob([JSON.stringify(data, null, 2)], { type: "application/json" }));
  link.download = filename;
  link.click();
  setTimeout(() => URL.revokeObjectURL(link.href), 1000);
}
