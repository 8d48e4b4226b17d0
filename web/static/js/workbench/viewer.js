// The deep-zoom scan and the geometry every other module draws and clicks through.
//
// Image coordinates follow the project convention: (u, v) in pixels of the stored sheet, origin at the top-left
// corner of the top-left pixel, u right, v down. OpenSeadragon's image coordinates use the same origin, so the
// mapping image -> viewer element is one affine transform (a rotation and a scale plus a shift) that we read
// from three points each frame and apply to every vertex ourselves (fast for 20,000 vertices).
//
// Tools: one tool at a time receives the pointer. A tool is an object with optional methods press(point, event)
// (return true to take over the drag, which then does not pan), drag, release, click, doubleClick, hover, cancel.
const OSD = window.OpenSeadragon;

export function createViewer(element, { tiles, width, height, bus }) {
  const osd = OSD({
    element,
    prefixUrl: "/static/vendor/openseadragon/images/",
    tileSources: tiles,
    drawer: "canvas",
    showNavigationControl: false,
    showNavigator: true,
    navigatorPosition: "BOTTOM_RIGHT",
    keyboardNavEnabled: false,
    maxZoomPixelRatio: 8,
    visibilityRatio: 0.2,
    animationTime: 0.35,
    gestureSettingsMouse: { clickToZoom: false, dblClickToZoom: false, flickEnabled: false },
    gestureSettingsTouch: { clickToZoom: false, dblClickToZoom: false },
    crossOriginPolicy: false,
    preserveImageSizeOnResize: true,
  });
  let tool = null;
  let dragging = false;

  function transform() {
    const item = osd.world.getItemAt(0);
    if (!item) return null;
    const o = item.imageToViewerElementCoordinates(new OSD.Point(0, 0));
    const a = item.imageToViewerElementCoordinates(new OSD.Point(width, 0));
    const b = item.imageToViewerElementCoordinates(new OSD.Point(0, height));
    const t = { ox: o.x, oy: o.y, ux: (a.x - o.x) / width, uy: (a.y - o.y) / width, vx: (b.x - o.x) / height, vy: (b.y - o.y) / height };
    t.scale = Math.hypot(t.ux, t.uy);
    t.det = t.ux * t.vy - t.vx * t.uy;
    return t;
  }

  const toElement = (t, u, v) => [t.ox + t.ux * u + t.vx * v, t.oy + t.uy * u + t.vy * v];

  function toImage(t, x, y) {
    const dx = x - t.ox;
    const dy = y - t.oy;
    return [(t.vy * dx - t.vx * dy) / t.det, (-t.uy * dx + t.ux * dy) / t.det];
  }

  function imagePoint(position) {
    const t = transform();
    if (!t) return null;
    const [u, v] = toImage(t, position.x, position.y);
    return { u, v, x: position.x, y: position.y, t };
  }

  function route(name, event) {
    if (!tool || !tool[name]) return undefined;
    const point = imagePoint(event.position);
    return point ? tool[name](point, event) : undefined;
  }

  osd.addHandler("canvas-press", (event) => {
    dragging = Boolean(route("press", event));
  });
  osd.addHandler("canvas-drag", (event) => {
    if (!dragging) return;
    event.preventDefaultAction = true;
    route("drag", event);
  });
  osd.addHandler("canvas-release", (event) => {
    if (dragging) route("release", event);
    dragging = false;
  });
  osd.addHandler("canvas-click", (event) => {
    if (!event.quick || !tool) return;
    event.preventDefaultAction = true;
    route("click", event);
  });
  osd.addHandler("canvas-double-click", (event) => {
    if (!tool) return;
    event.preventDefaultAction = true;
    route("doubleClick", event);
  });
  element.addEventListener("pointermove", (event) => {
    const rect = element.getBoundingClientRect();
    const point = imagePoint({ x: event.clientX - rect.left, y: event.clientY - rect.top });
    if (!point) return;
    if (tool && tool.hover) tool.hover(point, event);
    bus.dispatchEvent(new CustomEvent("pointer", { detail: point }));
  });
  element.addEventListener("pointerleave", () => bus.dispatchEvent(new CustomEvent("pointer", { detail: null })));

  function setTool(next) {
    if (tool === next) return;
    const previous = tool;
    tool = next;
    dragging = false;
    if (previous && previous.cancel) previous.cancel();
    element.dataset.tool = next ? next.name : "pan";
    bus.dispatchEvent(new CustomEvent("tool", { detail: next }));
  }

  function rotateBy(degrees) {
    const angle = ((osd.viewport.getRotation() + degrees) % 360 + 360) % 360;
    osd.viewport.setRotation(angle);
    bus.dispatchEvent(new CustomEvent("rotation", { detail: angle }));
  }

  function resetRotation() {
    osd.viewport.setRotation(0);
    bus.dispatchEvent(new CustomEvent("rotation", { detail: 0 }));
  }

  function showImageRect(u0, v0, u1, v1, immediately = false) {
    const item = osd.world.getItemAt(0);
    if (!item) return;
    osd.viewport.fitBounds(item.imageToViewportRectangle(u0, v0, u1 - u0, v1 - v0), immediately);
  }

  function centreOn(u, v) {
    const item = osd.world.getItemAt(0);
    if (item) osd.viewport.panTo(item.imageToViewportCoordinates(u, v));
  }

  return {
    osd,
    element,
    width,
    height,
    transform,
    toElement,
    toImage,
    setTool,
    get tool() { return tool; },
    rotateBy,
    resetRotation,
    showImageRect,
    centreOn,
    home: (immediately = false) => osd.viewport.goHome(immediately),
    zoomBy: (factor) => { osd.viewport.zoomBy(factor); osd.viewport.applyConstraints(); },
    panByScreen: (dx, dy) => {
      osd.viewport.panBy(osd.viewport.deltaPointsFromPixels(new OSD.Point(dx, dy)));
    },
  };
}
