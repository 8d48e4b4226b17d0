// One canvas over the scan, redrawn in the same frame as OpenSeadragon draws the tiles (its "update-viewport"
// event), so control points, traces and fitted curves stay in register while panning, zooming and turning.
// Layers draw in order; each gets the 2D context and the current image -> element transform.

export function createOverlay(stage, viewer) {
  const canvas = document.createElement("canvas");
  canvas.className = "wb-overlay";
  canvas.setAttribute("aria-hidden", "true");
  stage.append(canvas);
  const context = canvas.getContext("2d");
  const layers = [];
  let ratio = 1;
  let pending = false;

  function resize() {
    ratio = window.devicePixelRatio || 1;
    const { clientWidth, clientHeight } = viewer.element;
    canvas.style.width = `${clientWidth}px`;
    canvas.style.height = `${clientHeight}px`;
    canvas.width = Math.max(1, Math.round(clientWidth * ratio));
    canvas.height = Math.max(1, Math.round(clientHeight * ratio));
  }

  function draw() {
    const t = viewer.transform();
    context.setTransform(1, 0, 0, 1, 0, 0);
    context.clearRect(0, 0, canvas.width, canvas.height);
    if (!t) return;
    context.setTransform(ratio, 0, 0, ratio, 0, 0);
    for (const layer of layers) {
      context.save();
      layer.draw(context, t);
      context.restore();
    }
  }

  function requestDraw() {
    if (pending) return;
    pending = true;
    requestAnimationFrame(() => {
      pending = false;
      draw();
    });
  }

  resize();
  new ResizeObserver(() => { resize(); requestDraw(); }).observe(viewer.element);
  viewer.osd.addHandler("update-viewport", draw);
  viewer.osd.addHandler("open", requestDraw);

  return {
    canvas,
    addLayer(layer) {
      layers.push(layer);
      layers.sort((a, b) => (a.order || 0) - (b.order || 0));
      requestDraw();
    },
    requestDraw,
    drawNow: draw,
  };
}

// Helpers shared by the layers. Points are [u, v] pairs in image pixels; null or NaN entries break the line.
// Vertices closer than MERGE_PX on screen to the last one drawn are skipped: at a whole-sheet view a 20,000-vertex
// trace has dozens of vertices per screen pixel, and stroking them all costs time without changing a pixel.
const MERGE_PX = 0.6;

export function tracePath(context, t, points) {
  context.beginPath();
  let open = false;
  let lastX = 0;
  let lastY = 0;
  let skipped = null;
  const end = points.length - 1;
  for (let k = 0; k <= end; k += 1) {
    const point = points[k];
    if (!point || point[0] === null || point[1] === null || Number.isNaN(point[0])) {
      if (skipped) context.lineTo(skipped[0], skipped[1]);
      open = false;
      skipped = null;
      continue;
    }
    const x = t.ox + t.ux * point[0] + t.vx * point[1];
    const y = t.oy + t.uy * point[0] + t.vy * point[1];
    if (!open) {
      context.moveTo(x, y);
      open = true;
    } else if (Math.abs(x - lastX) + Math.abs(y - lastY) < MERGE_PX && k !== end) {
      skipped = [x, y];
      continue;
    } else {
      context.lineTo(x, y);
    }
    lastX = x;
    lastY = y;
    skipped = null;
  }
  if (skipped) context.lineTo(skipped[0], skipped[1]);
}

export function strokeWithHalo(context, width, colour, halo = "rgba(255,255,255,0.85)") {
  context.lineJoin = "round";
  context.lineCap = "round";
  context.strokeStyle = halo;
  context.lineWidth = width + 2.5;
  context.stroke();
  context.strokeStyle = colour;
  context.lineWidth = width;
  context.stroke();
}

export function elementPoint(t, u, v) {
  return [t.ox + t.ux * u + t.vx * v, t.oy + t.uy * u + t.vy * v];
}

export function label(context, text, x, y, colour = "#1b2630") {
  context.font = "600 11px system-ui, sans-serif";
  const width = context.measureText(text).width;
  context.fillStyle = "rgba(255,255,255,0.9)";
  context.fillRect(x - 2, y - 11, width + 4, 14);
  context.fillStyle = colour;
  context.fillText(text, x, y);
}
