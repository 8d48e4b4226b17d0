// What a chart spec's printed grid gives on this scan (POST .../calibration/detect), shown for review before
// anything enters the draft: the grid crossings (or a circular chart's centre and rings) drawn on the scan in
// green, how sure the search is, which way up the sheet lies, and its warnings. "Use these points" puts them in
// the draft (still to be saved); "Discard" forgets them.
import { ApiError, postJson } from "./api.js";
import { draftFromDetection } from "./chart-spec-draft.js";
import { elementPoint } from "./overlay.js";

const COLOUR = "#2b8a3e";
const fixed = (value, digits = 2) => (value === null || value === undefined ? "–" : Number(value).toFixed(digits));

function drawCrossings(context, t, points) {
  for (const point of points) {
    const [x, y] = elementPoint(t, point.pixel[0], point.pixel[1]);
    context.beginPath();
    context.moveTo(x, y - 7); context.lineTo(x + 7, y); context.lineTo(x, y + 7); context.lineTo(x - 7, y);
    context.closePath();
    context.strokeStyle = "rgba(255,255,255,0.9)";
    context.lineWidth = 4;
    context.stroke();
    context.strokeStyle = COLOUR;
    context.lineWidth = 2;
    context.stroke();
  }
}

function drawRings(context, t, found) {
  const [x, y] = elementPoint(t, found.centre[0], found.centre[1]);
  context.strokeStyle = COLOUR;
  context.lineWidth = 2;
  context.beginPath();
  context.moveTo(x - 16, y); context.lineTo(x + 16, y);
  context.moveTo(x, y - 16); context.lineTo(x, y + 16);
  context.stroke();
  context.setLineDash([8, 5]);
  for (const ring of found.rings) {
    if (ring.radius_px === null) continue;
    context.beginPath();
    context.arc(x, y, ring.radius_px * t.scale, 0, 2 * Math.PI);
    context.stroke();
  }
}

function proposalLayer({ found, visible }) {
  return {
    order: 15,
    draw(context, t) {
      const result = found();
      if (!result || !visible()) return;
      if (result.kind === "circular") drawRings(context, t, result);
      drawCrossings(context, t, result.control_points || []);
    },
  };
}

function describe(result) {
  const sure = `confidence ${fixed(result.confidence)}`;
  if (result.kind === "circular") {
    const rings = result.rings.filter((ring) => ring.radius_px !== null).length;
    const axis = result.value_axis;
    const zero = result.calibration ? `time zero found, ${(result.control_points || []).length} crossings checked` : "time zero still has to be clicked";
    return `Centre at (${fixed(result.centre[0], 1)}, ${fixed(result.centre[1], 1)}) px; ${rings} of ${result.rings.length} printed rings found; values ${axis.min} to ${axis.max} between radii ${fixed(axis.radius_min_px, 1)} and ${fixed(axis.radius_max_px, 1)} px; ${zero}; ${sure}.`;
  }
  const turned = result.orientation === "upright" ? "upright" : result.orientation;
  return `${result.control_points.length} grid crossings found (green diamonds on the scan); sheet ${turned}, grid turned ${fixed(result.rotation_deg, 2)}°; points off by ${fixed(result.residuals.rms_px, 3)} px RMS; ${sure}.`;
}

export function createProposal(panel, wb, drafts, { onClose }) {
  const box = panel.querySelector("[data-spec-proposal]");
  const text = box.querySelector("[data-proposal-text]");
  const warnings = box.querySelector("[data-proposal-warnings]");
  const accept = box.querySelector('[data-action="accept-proposal"]');
  const discardButton = box.querySelector('[data-action="discard-proposal"]');
  let found = null;
  let asking = 0;

  wb.overlay.addLayer(proposalLayer({ found: () => found, visible: () => wb.activeTab() === "calibrate" }));

  function show(message, list, usable) {
    box.hidden = false;
    text.textContent = message;
    warnings.replaceChildren(...list.map((warning) => Object.assign(document.createElement("li"), { textContent: warning })));
    accept.hidden = !usable;
    discardButton.textContent = usable ? "Discard" : "Close";
    wb.overlay.requestDraw();
  }

  async function find(specId, name) {
    const mine = ++asking;
    found = null;
    show(`Looking for the printed grid of “${name}” on this sheet…`, [], false);
    try {
      const result = await postJson(`/api/v1/sheets/${wb.sheetId}/calibration/detect`, { chart_spec_id: specId });
      if (mine !== asking) return;
      found = result;
      // Say what accepting fills: a whole calibration, or only the centre and rings of a circular chart.
      accept.textContent = result.calibration ? "Use these points" : "Use the centre and rings";
      show(describe(result), result.warnings, true);
      accept.focus();
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      if (mine !== asking) return;
      show(`Not found: ${error.message}`, [], false);
      discardButton.focus();
    }
  }

  function useCircle(result) {
    const form = drafts.form;
    const axis = result.value_axis;
    form.kind.value = "circular";
    const values = {
      centre_u: result.centre[0], centre_v: result.centre[1], value_min: axis.min, value_max: axis.max,
      radius_min: axis.radius_min_px, radius_max: axis.radius_max_px,
    };
    for (const [name, value] of Object.entries(values)) form.elements[name].value = String(Math.round(value * 1000) / 1000);
    form.value_scale.value = axis.scale;
    drafts.changed();
  }

  function discard(focus = true) {
    asking += 1;
    found = null;
    box.hidden = true;
    wb.overlay.requestDraw();
    if (focus) onClose(false);
  }

  accept.addEventListener("click", () => {
    if (!found) return;
    // A complete calibration replaces the draft; a circular chart without time zero gives its rings only.
    if (found.calibration) drafts.load(draftFromDetection(found, drafts.current()), { keepStart: true });
    else useCircle(found);
    found = null;
    box.hidden = true;
    wb.overlay.requestDraw();
    onClose(true);
  });
  discardButton.addEventListener("click", () => discard());

  return { find, discard };
}
