// Automatic tracing: the pen colour (typed, or picked from the scan), a region (box, polygon or the whole
// calibrated area), then the server finds the line as a background job whose progress is shown. The new trace is
// highlighted for review: keep it, or discard it (withdrawn with a reason, so the history still shows it).
import { ApiError, getJson, request } from "./api.js";

const POLL_MS = 350;
const sleep = (ms) => new Promise((resolve) => { setTimeout(resolve, ms); });

function describeRegion(region) {
  if (!region) return "No region drawn yet.";
  if (region.kind === "box") {
    const [u0, v0, u1, v1] = region.box.map((c) => Math.round(c));
    return `Box from (${Math.min(u0, u1)}, ${Math.min(v0, v1)}) to (${Math.max(u0, u1)}, ${Math.max(v0, v1)}) px.`;
  }
  return `Polygon with ${region.points.length} corners.`;
}

export function createAutoTrace(panel, wb) {
  const form = panel.querySelector("[data-auto-form]");
  const progress = panel.querySelector("[data-auto-progress]");
  const state = panel.querySelector("[data-auto-state]");
  const hex = panel.querySelector("[data-pen-hex]");
  const note = panel.querySelector("[data-colour-note]");
  const regionNote = panel.querySelector("[data-region-note]");
  const review = document.querySelector("[data-review]");
  const reviewText = review.querySelector("[data-review-text]");
  let busy = false;

  const regionKind = () => form.elements.region.value;

  function regionBody() {
    if (regionKind() === "calibrated_area") return { calibrated_area: true };
    const region = wb.regions.region;
    if (!region || region.kind !== regionKind()) return null;
    return region.kind === "box" ? { box: region.box } : { polygon: region.points };
  }

  async function waitForJob(job) {
    let current = job;
    while (current.status === "queued" || current.status === "running") {
      progress.value = current.progress || 0;
      state.textContent = current.message ? `${current.message}…` : current.status === "queued" ? "Waiting for a worker…" : "Tracing…";
      await sleep(POLL_MS);
      current = await getJson(`/api/v1/jobs/${current.id}`);
    }
    if (current.status !== "succeeded") throw new ApiError(422, current.error || "the automatic tracing failed", current);
    return current.result.trace_id;
  }

  async function find(event) {
    event.preventDefault();
    if (busy) return;
    const region = regionBody();
    if (!region) { state.textContent = "Draw the region first (or choose the calibrated area)."; return; }
    const body = { name: form.elements.name.value.trim(), unit: form.elements.unit.value.trim(), pen_color: form.elements.pen_color.value, region };
    const tolerance = form.elements.tolerance.value;
    if (tolerance !== "") body.tolerance = Number(tolerance);
    busy = true;
    progress.hidden = false;
    progress.value = 0;
    state.textContent = "Starting…";
    try {
      const answer = await request("POST", `/api/v1/sheets/${wb.sheetId}/traces/auto?background=true`, { body });
      const traceId = answer.status === 202 ? await waitForJob(answer.data) : answer.data.id;
      const entry = await wb.store.reload(traceId);
      wb.store.select(traceId);
      wb.store.reviewId = traceId;
      state.textContent = "";
      showReview(entry);
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      state.textContent = `Nothing stored: ${error.message}`;
    } finally {
      busy = false;
      progress.hidden = true;
    }
  }

  function showReview(entry) {
    const count = entry.vertices.length.toLocaleString("en");
    reviewText.textContent = `Found “${entry.data.name}”: ${count} vertices, highlighted on the scan. Keep it?`;
    review.hidden = false;
    review.querySelector("[data-review-keep]").focus();
  }

  async function endReview(keep) {
    const entry = wb.store.get(wb.store.reviewId);
    review.hidden = true;
    wb.store.reviewId = null;
    wb.regions.clear();
    if (!entry) return;
    if (keep) { wb.status.saving(`Trace “${entry.data.name}” kept (version ${entry.data.version})`, "ok"); return; }
    try {
      await request("DELETE", `/api/v1/traces/${entry.data.id}?reason=${encodeURIComponent("discarded at review after automatic tracing")}`, { etag: entry.etag });
      wb.store.remove(entry.data.id);
      wb.status.saving(`Trace “${entry.data.name}” discarded`, "ok");
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      wb.status.saving(`Not discarded: ${error.message}`, "error");
    }
  }

  async function pickColour() {
    const answer = await wb.colours.pick();
    if (!answer) return;
    if (answer.error) { note.textContent = answer.error; return; }
    form.elements.pen_color.value = answer.pen_color;
    hex.textContent = answer.pen_color;
    note.textContent = answer.ink_found
      ? `Ink ${answer.pen_color} on paper ${answer.paper_color} (difference ${answer.difference.toFixed(0)}).`
      : `Nothing there stands out from the paper (${answer.paper_color}); click right on the line.`;
  }

  form.elements.pen_color.addEventListener("input", () => { hex.textContent = form.elements.pen_color.value; });
  form.addEventListener("submit", find);
  panel.querySelector('[data-action="pick-colour"]').addEventListener("click", pickColour);
  panel.querySelector('[data-action="draw-region"]').addEventListener("click", () => {
    if (regionKind() === "calibrated_area") { regionNote.textContent = "The whole calibrated area will be searched."; return; }
    wb.regions.start(regionKind());
  });
  for (const radio of form.elements.region) {
    radio.addEventListener("change", () => {
      regionNote.textContent = regionKind() === "calibrated_area" ? "The whole calibrated area will be searched." : describeRegion(wb.regions.region);
    });
  }
  review.querySelector("[data-review-keep]").addEventListener("click", () => endReview(true));
  review.querySelector("[data-review-discard]").addEventListener("click", () => endReview(false));

  return {
    pickColour,
    regionChanged(region) { regionNote.textContent = describeRegion(region); },
    drawRegion(kind) {
      form.elements.region.value = kind;
      wb.regions.start(kind);
    },
  };
}
