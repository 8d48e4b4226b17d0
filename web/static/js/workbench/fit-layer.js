// A fit on the scan: the fitted curve (solid over the traced range, dashed amber beyond it), its confidence band
// filled, its prediction band as thin dashed edges, the stretch beyond the traced range shaded amber as a warning,
// and rings on samples whose residual exceeds 2.5 residual standard deviations (value units, like the residuals).
import { elementPoint, label, strokeWithHalo, tracePath } from "./overlay.js";

const CURVE = "#212529";
const BAND = "rgba(33,37,41,0.16)";
const OUTSIDE = "rgba(245,159,0,0.32)";
const OUTSIDE_LINE = "#e67700";
const OUTLIER_SD = 2.5;
const OUTSIDE_TEXT = "outside the traced range";
const LABEL_WIDTH = 150; // px kept free at the right edge for the label text

function runs(length, keep) {
  const out = [];
  let start = -1;
  for (let k = 0; k <= length; k += 1) {
    const ok = k < length && keep(k);
    if (ok && start < 0) start = k;
    if (!ok && start >= 0) { out.push([start, k]); start = -1; }
  }
  return out;
}

function fillBand(context, t, lower, upper, outside) {
  const finite = (k) => lower[k] && upper[k] && lower[k][0] !== null && upper[k][0] !== null;
  for (const flag of [false, true]) {
    context.fillStyle = flag ? OUTSIDE : BAND;
    for (const [a, b] of runs(lower.length, (k) => finite(k) && outside[k] === flag)) {
      const from = Math.max(0, a - 1);
      const polygon = [...lower.slice(from, b), ...upper.slice(from, b).reverse()];
      tracePath(context, t, polygon);
      context.closePath();
      context.fill();
    }
  }
}

function strokeCurve(context, t, points, outside) {
  for (const flag of [false, true]) {
    for (const [a, b] of runs(points.length, (k) => outside[k] === flag)) {
      tracePath(context, t, points.slice(Math.max(0, a - 1), b));
      context.setLineDash(flag ? [6, 4] : []);
      strokeWithHalo(context, 1.5, flag ? OUTSIDE_LINE : CURVE, "rgba(255,255,255,0.6)");
    }
  }
  context.setLineDash([]);
}

// One label per stretch beyond the traced range, at its first point on screen; none for a stretch scrolled off
// screen, so the label never points at curve the user cannot see.
function labelOutside(context, t, fitted, outside) {
  const width = context.canvas.clientWidth;
  const height = context.canvas.clientHeight;
  const onScreen = ([x, y]) => x >= 0 && x <= width && y >= 0 && y <= height;
  for (const [a, b] of runs(fitted.length, (k) => outside[k] && fitted[k][0] !== null && fitted[k][1] !== null)) {
    let point = null;
    for (let k = a; k < b && !point; k += 1) {
      const candidate = elementPoint(t, fitted[k][0], fitted[k][1]);
      if (onScreen(candidate)) point = candidate;
    }
    if (!point) continue;
    const [x, y] = point;
    label(context, OUTSIDE_TEXT, Math.max(Math.min(x + 6, width - LABEL_WIDTH), 6), Math.max(y - 8, 14), OUTSIDE_LINE);
  }
}

function markOutliers(context, t, curve) {
  if (!curve.residual_sd) return;
  context.strokeStyle = "#c92a2a";
  context.lineWidth = 1.5;
  for (const residual of curve.residuals) {
    if (Math.abs(residual.residual) <= OUTLIER_SD * curve.residual_sd || residual.pixel[0] === null) continue;
    const [x, y] = elementPoint(t, residual.pixel[0], residual.pixel[1]);
    context.beginPath();
    context.arc(x, y, 5, 0, 2 * Math.PI);
    context.stroke();
  }
}

export function fitLayer(model) {
  return {
    order: 40,
    draw(context, t) {
      const curve = model.curve();
      if (!curve || !model.visible()) return;
      const { pixels, outside } = curve;
      if (pixels.confidence_lower) fillBand(context, t, pixels.confidence_lower, pixels.confidence_upper, outside);
      if (pixels.prediction_lower) {
        context.setLineDash([3, 4]);
        context.lineWidth = 1;
        context.strokeStyle = CURVE;
        for (const edge of [pixels.prediction_lower, pixels.prediction_upper]) { tracePath(context, t, edge); context.stroke(); }
        context.setLineDash([]);
      }
      strokeCurve(context, t, pixels.fitted, outside);
      markOutliers(context, t, curve);
      labelOutside(context, t, pixels.fitted, outside);
    },
  };
}
