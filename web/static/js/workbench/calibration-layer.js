// What the calibration looks like on the scan: its grid (round values mapped back through the fitted
// calibration, so a misfit shows as lines off the printed grid), the control points with their numbers and
// residual arrows drawn twenty times longer than they are, and the drafted circular geometry.
import { elementPoint, label, tracePath } from "./overlay.js";

export const RESIDUAL_EXAGGERATION = 20;
const POINT = "#a61e4d";
const GRID = "#0b7285";

function drawGrid(context, t, grid, circular) {
  context.setLineDash([6, 4]);
  context.lineWidth = 1;
  context.strokeStyle = GRID;
  for (const line of grid) {
    tracePath(context, t, line.points);
    context.stroke();
  }
  context.setLineDash([]);
  for (const line of grid) {
    // Time lines of a circular chart start at the crowded centre: label them at their outer end instead.
    const at = circular && line.axis === "x" ? line.points[line.points.length - 1] : line.points[0];
    const [x, y] = elementPoint(t, ...at);
    label(context, line.label, x + 3, y - 3, GRID);
  }
}

function drawPoints(context, t, points, residuals, selected) {
  points.forEach((point, index) => {
    if (!Number.isFinite(point.u) || !Number.isFinite(point.v)) return;
    const [x, y] = elementPoint(t, point.u, point.v);
    const big = index === selected;
    context.strokeStyle = "rgba(255,255,255,0.9)";
    context.lineWidth = 4;
    context.beginPath();
    context.arc(x, y, big ? 9 : 7, 0, 2 * Math.PI);
    context.stroke();
    context.strokeStyle = POINT;
    context.lineWidth = big ? 2.5 : 1.5;
    context.beginPath();
    context.arc(x, y, big ? 9 : 7, 0, 2 * Math.PI);
    context.moveTo(x - 13, y); context.lineTo(x - 3, y);
    context.moveTo(x + 3, y); context.lineTo(x + 13, y);
    context.moveTo(x, y - 13); context.lineTo(x, y - 3);
    context.moveTo(x, y + 3); context.lineTo(x, y + 13);
    context.stroke();
    label(context, String(index + 1), x + 10, y - 10, POINT);
    const residual = residuals[index];
    if (residual && residual.residual_px && residual.residual_px[0] !== null) {
      // residual = clicked - predicted: the arrow points from the click towards where the values belong.
      const [du, dv] = residual.residual_px;
      const [px, py] = elementPoint(t, point.u - RESIDUAL_EXAGGERATION * du, point.v - RESIDUAL_EXAGGERATION * dv);
      context.strokeStyle = residual.outlier ? "#c92a2a" : "#e67700";
      context.lineWidth = 2;
      context.beginPath();
      context.moveTo(x, y);
      context.lineTo(px, py);
      context.stroke();
    }
  });
}

function drawGeometry(context, t, geometry) {
  context.strokeStyle = "#5f3dc4";
  context.lineWidth = 1.5;
  if (geometry.centre) {
    const [x, y] = elementPoint(t, ...geometry.centre);
    context.beginPath();
    context.moveTo(x - 14, y); context.lineTo(x + 14, y);
    context.moveTo(x, y - 14); context.lineTo(x, y + 14);
    context.stroke();
    for (const radius of geometry.radii) {
      context.beginPath();
      context.arc(x, y, radius * t.scale, 0, 2 * Math.PI);
      context.stroke();
    }
  }
  if (geometry.zero) {
    const [x, y] = elementPoint(t, ...geometry.zero);
    context.fillStyle = "#5f3dc4";
    context.fillRect(x - 4, y - 4, 8, 8);
    label(context, "time zero", x + 8, y - 6, "#5f3dc4");
  }
  if (geometry.pivot && geometry.arm > 0) {
    const [x, y] = elementPoint(t, ...geometry.pivot);
    context.setLineDash([2, 5]);
    context.beginPath();
    context.arc(x, y, geometry.arm * t.scale, 0, 2 * Math.PI);
    context.stroke();
    context.setLineDash([]);
  }
}

export function calibrationLayer(model) {
  return {
    order: 10,
    draw(context, t) {
      if (!model.visible()) return;
      drawGrid(context, t, model.grid(), model.geometry().kind === "circular");
      drawGeometry(context, t, model.geometry());
      drawPoints(context, t, model.points(), model.residuals(), model.selected());
    },
  };
}
