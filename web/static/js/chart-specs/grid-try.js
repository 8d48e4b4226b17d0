// "Try on a sheet": look for the grid as entered (saved or not) on one of the collection's sheets through the
// detect API, without accepting anything, and say how sure the search is and how many lines or rings it found.
import { ApiError, postJson } from "../workbench/api.js";

// Detection stores a calibration only at this confidence or above unless asked otherwise (DetectRequest).
const STORE_CONFIDENCE = 0.5;
const fixed = (value, digits = 2) => (value === null || value === undefined ? "–" : Number(value).toFixed(digits));

function cartesianFindings(result) {
  const [xMeasured, xChosen] = result.lines_measured.x;
  const [yMeasured, yChosen] = result.lines_measured.y;
  return [
    `Grid lines measured: ${xMeasured} of ${xChosen} across (x), ${yMeasured} of ${yChosen} up (y).`,
    `${result.control_points.length} grid crossings, off by ${fixed(result.residuals.rms_px, 3)} px RMS; sheet ${result.orientation}, grid turned ${fixed(result.rotation_deg)}°.`,
  ];
}

function circularFindings(result) {
  const found = result.rings.filter((ring) => ring.radius_px !== null).length;
  const zero = result.time_zero ? "time zero found from the time lines" : "time zero not looked for (the spec lacks the time lines, time-zero angle or direction)";
  return [
    `Printed rings found: ${found} of ${result.rings.length}; centre at (${fixed(result.centre[0], 1)}, ${fixed(result.centre[1], 1)}) px.`,
    `${zero}.`,
  ];
}

function paragraph(text, className = "") {
  const element = document.createElement("p");
  element.textContent = text;
  if (className) element.className = className;
  return element;
}

function report(box, result, sheetId) {
  const sure = result.confidence >= STORE_CONFIDENCE;
  const headline = `Confidence ${fixed(result.confidence)}: ${sure ? "the grid was found" : "too unsure to use"} (nothing was stored).`;
  const findings = result.kind === "circular" ? circularFindings(result) : cartesianFindings(result);
  const list = document.createElement("ul");
  for (const warning of result.warnings) list.append(Object.assign(document.createElement("li"), { textContent: warning }));
  const link = Object.assign(document.createElement("a"), { href: `/sheets/${sheetId}/workbench`, textContent: "Open this sheet's workbench" });
  box.replaceChildren(paragraph(headline, `notice ${sure ? "ok" : "warn"}`), ...findings.map((text) => paragraph(text)), list, link);
}

export function bindTry(form, { geometry, errors }) {
  const button = form.querySelector("[data-try-run]");
  const box = form.querySelector("[data-try-result]");
  const sheet = form.elements.namedItem("try_sheet");

  async function run() {
    errors.clear();
    const sheetId = Number(sheet.value);
    button.disabled = true;
    box.replaceChildren(paragraph("Looking for the grid…", "muted"));
    try {
      const result = await postJson(`/api/v1/sheets/${sheetId}/calibration/detect`, { spec: geometry(), accept: false });
      report(box, result, sheetId);
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      box.replaceChildren(paragraph(`Not found: ${error.message}`, "notice error"));
      if (error.status === 422) errors.show("Not tried:", error.message);
    } finally {
      button.disabled = false;
    }
  }

  button.addEventListener("click", run);
}
