// Asking the person to click points on the scan: "click the centre", "click three or more points on one ring".
// pickPoints resolves with the clicked image points ([u, v] pairs) or null when cancelled (Esc or another tool).
// With a minimum below the maximum, Enter (or a double click) finishes; the hint says so.
import { elementPoint } from "./overlay.js";

export function createPicker({ viewer, overlay, hint }) {
  let picked = [];

  overlay.addLayer({
    order: 90,
    draw(context, t) {
      for (const [u, v] of picked) {
        const [x, y] = elementPoint(t, u, v);
        context.strokeStyle = "#0b7285";
        context.lineWidth = 2;
        context.beginPath();
        context.arc(x, y, 6, 0, 2 * Math.PI);
        context.moveTo(x - 10, y); context.lineTo(x + 10, y);
        context.moveTo(x, y - 10); context.lineTo(x, y + 10);
        context.stroke();
      }
    },
  });

  function pickPoints({ prompt, minimum = 1, maximum = minimum, label = "pick points" }) {
    return new Promise((resolve) => {
      picked = [];
      let settled = false;
      const finish = (result) => {
        if (settled) return;
        settled = true;
        picked = [];
        hint.clear();
        overlay.requestDraw();
        resolve(result);
      };
      const more = minimum < maximum ? " Press Enter when done." : "";
      hint.show(`${prompt}${more} Esc cancels.`);
      const tool = {
        name: "pick",
        label,
        click(point) {
          picked.push([point.u, point.v]);
          overlay.requestDraw();
          if (picked.length >= maximum) {
            finish(picked.slice());
            viewer.setTool(null);
          } else {
            hint.show(`${prompt} ${picked.length} so far.${more} Esc cancels.`);
          }
        },
        doubleClick() { tool.finish(); },
        finish() {
          if (picked.length < minimum) return;
          finish(picked.slice());
          viewer.setTool(null);
        },
        cancel() { finish(null); },
      };
      viewer.setTool(tool);
    });
  }

  return { pickPoints };
}

export function createHint(element) {
  return {
    show(text) { element.textContent = text; element.hidden = false; },
    clear() { element.textContent = ""; element.hidden = true; },
  };
}
