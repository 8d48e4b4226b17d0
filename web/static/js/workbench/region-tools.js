// Drawing the region an automatic trace searches: a box (drag from corner to corner) or a polygon (click its
// corners; Enter or a double click closes it, Backspace removes the last corner). The region stays on the scan,
// dashed, until it is redrawn.
import { elementPoint, tracePath } from "./overlay.js";

const REGION = "#1864ab";

export function createRegionTools({ viewer, overlay, hint, onChange }) {
  let region = null;
  let corner = null;

  const box = {
    name: "box",
    label: "draw a search box",
    press(point) { corner = [point.u, point.v]; region = { kind: "box", box: [point.u, point.v, point.u, point.v] }; return true; },
    drag(point) { region.box = [corner[0], corner[1], point.u, point.v]; overlay.requestDraw(); },
    release(point) {
      region.box = [corner[0], corner[1], point.u, point.v];
      const [u0, v0, u1, v1] = region.box;
      if (Math.abs(u1 - u0) < 2 || Math.abs(v1 - v0) < 2) region = null;
      viewer.setTool(null);
      hint.clear();
      onChange(region);
      overlay.requestDraw();
    },
  };

  const polygon = {
    name: "polygon",
    label: "draw a search polygon",
    click(point) {
      if (!region || region.kind !== "polygon" || region.closed) region = { kind: "polygon", points: [], closed: false };
      const last = region.points[region.points.length - 1];
      // The two clicks of a closing double click land on the last corner: do not repeat it.
      if (last && Math.hypot(last[0] - point.u, last[1] - point.v) * point.t.scale < 3) return;
      region.points.push([point.u, point.v]);
      overlay.requestDraw();
    },
    doubleClick() { polygon.finish(); },
    finish() {
      if (!region || region.points.length < 3) { hint.show("A polygon needs at least three corners. Esc cancels."); return; }
      region.closed = true;
      viewer.setTool(null);
      hint.clear();
      onChange(region);
      overlay.requestDraw();
    },
    back() { if (region && region.points) { region.points.pop(); overlay.requestDraw(); } },
    cancel() { if (region && region.kind === "polygon" && !region.closed) { region = null; onChange(null); overlay.requestDraw(); } },
  };

  overlay.addLayer({
    order: 60,
    draw(context, t) {
      if (!region) return;
      context.strokeStyle = REGION;
      context.fillStyle = "rgba(24,100,171,0.08)";
      context.lineWidth = 1.5;
      context.setLineDash([7, 4]);
      if (region.kind === "box") {
        const [u0, v0, u1, v1] = region.box;
        tracePath(context, t, [[u0, v0], [u1, v0], [u1, v1], [u0, v1], [u0, v0]]);
      } else {
        tracePath(context, t, region.closed ? [...region.points, region.points[0]] : region.points);
        for (const [u, v] of region.points) {
          const [x, y] = elementPoint(t, u, v);
          context.fillRect(x - 3, y - 3, 6, 6);
        }
      }
      context.fill();
      context.stroke();
      context.setLineDash([]);
    },
  });

  return {
    start(kind) {
      const tool = kind === "polygon" ? polygon : box;
      viewer.setTool(tool);
      hint.show(kind === "polygon"
        ? "Click the corners of the search polygon; Enter or a double click closes it, Backspace removes the last corner. Esc cancels."
        : "Drag a box around the stretch of pen line to find. Esc cancels.");
    },
    get region() { return region && (region.kind === "box" || region.closed) ? region : null; },
    clear() { region = null; overlay.requestDraw(); },
    tools: { box, polygon },
  };
}
