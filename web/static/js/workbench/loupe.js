// A magnifier for precise placement: the screen around the pointer (scan and overlay) at four times, with a
// cross-hair on the exact point and its image coordinates. It sits in a corner of the scan and moves to the
// other corner when the pointer comes near it.
const MAGNIFICATION = 4;

export function createLoupe(canvas, viewer, overlay, bus) {
  const context = canvas.getContext("2d");
  const size = canvas.width;
  let on = false;
  let last = null;

  function place(point) {
    const near = point.x < size + 40 && point.y < size + 40;
    canvas.classList.toggle("wb-loupe-right", near);
  }

  function paint(point) {
    const source = viewer.osd.drawer && viewer.osd.drawer.canvas;
    if (!source || !source.width) return;
    const ratio = source.width / source.clientWidth;
    const span = size / MAGNIFICATION;
    const sx = (point.x - span / 2) * ratio;
    const sy = (point.y - span / 2) * ratio;
    context.imageSmoothingEnabled = false;
    context.fillStyle = "#2b2f33";
    context.fillRect(0, 0, size, size);
    context.drawImage(source, sx, sy, span * ratio, span * ratio, 0, 0, size, size);
    const overlayRatio = overlay.canvas.width / overlay.canvas.clientWidth;
    context.drawImage(overlay.canvas, (point.x - span / 2) * overlayRatio, (point.y - span / 2) * overlayRatio,
      span * overlayRatio, span * overlayRatio, 0, 0, size, size);
    context.strokeStyle = "rgba(232,176,75,0.95)";
    context.lineWidth = 1;
    context.beginPath();
    context.moveTo(size / 2, 0); context.lineTo(size / 2, size / 2 - 6);
    context.moveTo(size / 2, size / 2 + 6); context.lineTo(size / 2, size);
    context.moveTo(0, size / 2); context.lineTo(size / 2 - 6, size / 2);
    context.moveTo(size / 2 + 6, size / 2); context.lineTo(size, size / 2);
    context.stroke();
    context.font = "11px ui-monospace, monospace";
    context.fillStyle = "rgba(27,38,48,0.8)";
    context.fillRect(0, size - 16, size, 16);
    context.fillStyle = "#fff";
    context.fillText(`u ${point.u.toFixed(1)}  v ${point.v.toFixed(1)}`, 6, size - 4);
  }

  bus.addEventListener("pointer", (event) => {
    last = event.detail;
    if (!on) return;
    canvas.hidden = !last;
    if (last) { place(last); paint(last); }
  });
  viewer.osd.addHandler("update-viewport", () => { if (on && last) paint(last); });

  return {
    get on() { return on; },
    toggle(force) {
      on = force === undefined ? !on : Boolean(force);
      canvas.hidden = !on || !last;
      bus.dispatchEvent(new CustomEvent("loupe", { detail: on }));
    },
  };
}
