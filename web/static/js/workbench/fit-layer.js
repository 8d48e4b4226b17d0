// A fit on the scan: the fitted curve (solid over the traced range, dashed amber beyond it), its confidence band
// filled, its prediction band as thin dashed edges, the stretch beyond the traced range shaded amber as a warning,
// and rings on samples whose residual exceeds 2.5 residual standard deviations.
import { elementPoint, label, strokeWithHalo, tracePath } from "./overlay.js";

const CURVE = "#212529";
const BAND = "rgba(33,37,41,0.16)";
const OUTSIDE = "rgba(245,159,0,0.32)";
const OUTSIDE_LINE = "#e67700";
const OUTLIER_SD = 2.5;

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
      const first = outside.findIndex((flag, k) => flag && pixels.fitted[k][0] !== null);
      if (first >= 0) {
        const [x, y] = elementPoint(t, ...pixels.fitted[first]);
        const width = context.canvas.clientWidth;
        label(context, "outside the traced range", Math.min(Math.max(x + 6, 6), width - 150), y - 8, OUTSIDE_LINE);
      }
    },
  };
}
