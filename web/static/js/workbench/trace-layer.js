// Traces on the scan: every trace in its own overlay colour over a white halo (so the ink stays visible beside
// it), the selected one thicker with its vertices as small squares once they are far enough apart to grab, weak
// vertices (low tracing confidence) marked in amber, and a freshly found trace under review glowing until kept.
import { strokeWithHalo, tracePath } from "./overlay.js";

const HANDLE_SPACING_PX = 7;

function drawHandles(context, t, entry, selectedVertex, width, height) {
  const vertices = entry.vertices;
  const confidence = entry.data.confidence || [];
  let lastX = -1e9;
  let lastY = -1e9;
  context.lineWidth = 1;
  for (let k = 0; k < vertices.length; k += 1) {
    const [u, v] = vertices[k];
    const x = t.ox + t.ux * u + t.vx * v;
    const y = t.oy + t.uy * u + t.vy * v;
    if (x < -8 || y < -8 || x > width + 8 || y > height + 8) continue;
    const weak = confidence.length === vertices.length && confidence[k] < 0.5;
    if (k !== selectedVertex && !weak && Math.abs(x - lastX) + Math.abs(y - lastY) < HANDLE_SPACING_PX) continue;
    lastX = x;
    lastY = y;
    const size = k === selectedVertex ? 9 : 5;
    context.fillStyle = k === selectedVertex ? entry.colour : weak ? "#f59f00" : "#ffffff";
    context.strokeStyle = entry.colour;
    context.fillRect(x - size / 2, y - size / 2, size, size);
    context.strokeRect(x - size / 2, y - size / 2, size, size);
  }
}

export function traceLayer({ store, editor, overlay }) {
  return {
    order: 30,
    draw(context, t) {
      const width = overlay.canvas.clientWidth;
      const height = overlay.canvas.clientHeight;
      for (const entry of store.all()) {
        if (store.hidden.has(entry.data.id)) continue;
        const selected = entry.data.id === store.selectedId;
        const review = entry.data.id === store.reviewId;
        tracePath(context, t, entry.vertices);
        if (review) strokeWithHalo(context, 7, "rgba(250,176,5,0.55)", "rgba(255,255,255,0)");
        strokeWithHalo(context, selected ? 2.5 : 1.5, entry.colour);
        if (selected && editor.handlesVisible()) drawHandles(context, t, entry, editor.selectedVertex, width, height);
      }
      editor.drawGuides(context, t);
    },
  };
}
