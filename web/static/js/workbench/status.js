// The strip under the scan (pointer pixel, its chart values, zoom, tool) and the save-state line in the bar.
// Chart values under the pointer come from the server's calibration (the same code that derives every value),
// asked at most once per pause of the pointer.
import { ApiError, postJson } from "./api.js";

const PAUSE_MS = 140;

function formatValue(value, unit) {
  if (value === null || value === undefined) return "–";
  const text = Math.abs(value) >= 1e5 || (Math.abs(value) < 1e-3 && value !== 0) ? value.toExponential(4) : value.toFixed(4).replace(/\.?0+$/, "");
  return unit ? `${text} ${unit}` : text;
}

export function createStatus(root, { sheetId, viewer, bus, calibrationSource }) {
  const pixel = root.querySelector("[data-readout-pixel]");
  const values = root.querySelector("[data-readout-value]");
  const zoom = root.querySelector("[data-readout-zoom]");
  const toolLabel = root.querySelector("[data-readout-tool]");
  const save = root.querySelector("[data-save-state]");
  let timer = null;
  let asking = false;

  async function probe(point) {
    const spec = calibrationSource();
    if (!spec || asking) return;
    asking = true;
    try {
      const body = spec === "saved" ? { pixels: [[point.u, point.v]] } : { pixels: [[point.u, point.v]], spec };
      const answer = await postJson(`/api/v1/sheets/${sheetId}/calibration/map`, body);
      const [x, y] = answer.values[0];
      values.textContent = `x ${formatValue(x, answer.x_unit)} · y ${formatValue(y, answer.y_unit)}`;
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      values.textContent = "values: –";
    } finally {
      asking = false;
    }
  }

  bus.addEventListener("pointer", (event) => {
    const point = event.detail;
    clearTimeout(timer);
    if (!point) { pixel.textContent = "u –, v – px"; return; }
    pixel.textContent = `u ${point.u.toFixed(1)}, v ${point.v.toFixed(1)} px`;
    zoom.textContent = `zoom ${(point.t.scale * 100).toFixed(0)} %`;
    timer = setTimeout(() => probe(point), PAUSE_MS);
  });
  bus.addEventListener("tool", (event) => {
    toolLabel.textContent = `tool: ${event.detail ? event.detail.label : "pan"}`;
  });

  return {
    saving(text, kind = "") {
      save.textContent = text;
      save.dataset.kind = kind;
    },
  };
}
