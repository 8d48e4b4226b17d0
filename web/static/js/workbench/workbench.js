// The digitizing workbench: wires the scan viewer, the overlay and the four panels together. Each behaviour lives
// in its own module; this file only connects them, binds the toolbar and the keys, and exposes a small hook for
// the browser tests (image pixel -> page position, redraw timing).
import { createAutoTrace } from "./auto-trace.js";
import { createAutosave } from "./autosave.js";
import { createCalibratePanel } from "./calibrate-panel.js";
import { createColourPicker } from "./colour-picker.js";
import { createConflictDialog } from "./conflict-dialog.js";
import { createDataPanel } from "./data-panel.js";
import { createFitPanel } from "./fit-panel.js";
import { createLoupe } from "./loupe.js";
import { createOverlay } from "./overlay.js";
import { createHint, createPicker } from "./pick.js";
import { createRegionTools } from "./region-tools.js";
import { bindShortcuts } from "./shortcuts.js";
import { createStatus } from "./status.js";
import { createTabs } from "./tabs.js";
import { createTraceEditor } from "./trace-editor.js";
import { traceLayer } from "./trace-layer.js";
import { createTracePanel } from "./trace-panel.js";
import { createTraceStore } from "./trace-store.js";
import { createHistory } from "./undo.js";
import { createViewer } from "./viewer.js";

const root = document.querySelector("[data-workbench]");
const EDIT_TOOLS = new Set(["move", "extend", "insert", "erase"]);

function buildCore() {
  const bus = new EventTarget();
  const sheetId = Number(root.dataset.sheetId);
  const stage = root.querySelector("[data-stage]");
  const viewer = createViewer(root.querySelector("[data-viewer]"), {
    tiles: root.dataset.tiles,
    width: Number(root.dataset.width),
    height: Number(root.dataset.height),
    bus,
  });
  const overlay = createOverlay(stage, viewer);
  const hint = createHint(root.querySelector("[data-tool-hint]"));
  const wb = {
    root, bus, sheetId, viewer, overlay, hint,
    canEdit: root.dataset.canEdit === "true",
    initial: JSON.parse(document.getElementById("wb-initial").textContent),
  };
  wb.picker = createPicker({ viewer, overlay, hint });
  wb.store = createTraceStore({ sheetId, bus });
  wb.history = createHistory();
  wb.conflicts = createConflictDialog(document.querySelector("[data-conflict-dialog]"));
  wb.colours = createColourPicker({ sheetId, picker: wb.picker });
  wb.loupe = createLoupe(root.querySelector("[data-loupe]"), viewer, overlay, bus);
  return wb;
}

function buildPanels(wb) {
  wb.tabs = createTabs(root, wb.bus);
  wb.activeTab = () => wb.tabs.active;
  wb.status = createStatus(root, { sheetId: wb.sheetId, viewer: wb.viewer, bus: wb.bus, calibrationSource: () => wb.calibrate.probeSource() });
  wb.autosave = createAutosave({
    store: wb.store, status: wb.status, conflicts: wb.conflicts, sheetId: wb.sheetId, history: wb.history,
    onSaved: () => wb.overlay.requestDraw(),
  });
  wb.editor = createTraceEditor({
    store: wb.store, viewer: wb.viewer, overlay: wb.overlay, history: wb.history, autosave: wb.autosave,
    hint: wb.hint, bus: wb.bus, handlesVisible: () => wb.tabs.active === "trace" && Boolean(wb.viewer.tool) && EDIT_TOOLS.has(wb.viewer.tool.name),
  });
  wb.overlay.addLayer(traceLayer({ store: wb.store, editor: wb.editor, overlay: wb.overlay }));
  wb.calibrate = createCalibratePanel(root.querySelector('[data-panel="calibrate"]'), wb);
  wb.regions = createRegionTools({ viewer: wb.viewer, overlay: wb.overlay, hint: wb.hint, onChange: (region) => wb.autoTrace.regionChanged(region) });
  const tracePanel = root.querySelector('[data-panel="trace"]');
  wb.tracePanel = createTracePanel(tracePanel, wb);
  wb.autoTrace = createAutoTrace(tracePanel, wb);
  wb.fit = createFitPanel(root.querySelector('[data-panel="fit"]'), wb);
  createDataPanel(root.querySelector('[data-panel="data"]'), wb);
}

function nextTrace(wb, step) {
  const ids = wb.store.all().map((entry) => entry.data.id);
  if (!ids.length) return;
  const at = ids.indexOf(wb.store.selectedId);
  wb.store.select(ids[(at + step + ids.length) % ids.length]);
}

function keyActions(wb) {
  const { viewer, editor, calibrate } = wb;
  // Keys that change records do nothing for a read-only role (the buttons are disabled for them too).
  const editing = (run) => (event) => (wb.canEdit ? run(event) : false);
  const trace = (name) => editing(() => { wb.tabs.show("trace"); editor.use(name); });
  return {
    help: () => document.querySelector("[data-help-dialog]").showModal(),
    tab: (event) => wb.tabs.show(wb.tabs.names[Number(event.key) - 1]),
    escape: () => { if (!viewer.tool) return false; viewer.setTool(null); wb.hint.clear(); return true; },
    save: () => { if (wb.tabs.active === "calibrate") calibrate.save(); else wb.autosave.flushAll(); },
    zoom: (event) => viewer.zoomBy(event.key === "-" ? 1 / 1.4 : 1.4),
    home: () => viewer.home(),
    arrow: (event) => {
      const step = event.shiftKey ? 10 : 1;
      const [dx, dy] = { ArrowLeft: [-1, 0], ArrowRight: [1, 0], ArrowUp: [0, -1], ArrowDown: [0, 1] }[event.key];
      if (wb.canEdit && wb.tabs.active === "trace" && editor.nudge(dx * step, dy * step)) return;
      const t = viewer.transform();
      if (wb.canEdit && wb.tabs.active === "calibrate" && t && calibrate.nudgePoint(((t.vy * dx - t.vx * dy) / t.det) * step, ((-t.uy * dx + t.ux * dy) / t.det) * step)) return;
      viewer.panByScreen(dx * 60 * step, dy * 60 * step);
    },
    rotate: (event) => viewer.rotateBy((event.key === "[" || event.key === "{" ? -1 : 1) * (event.shiftKey ? 90 : 15)),
    upright: () => viewer.resetRotation(),
    loupe: () => wb.loupe.toggle(),
    place: editing(() => { wb.tabs.show("calibrate"); calibrate.togglePlacing(); }),
    nextTrace: (event) => nextTrace(wb, event.shiftKey ? -1 : 1),
    move: trace("move"),
    extend: trace("extend"),
    insert: trace("insert"),
    erase: trace("erase"),
    delete: editing(() => (wb.tabs.active === "calibrate" ? calibrate.removePoint() : editor.deleteVertex()) || false),
    undo: editing(() => editor.undo()),
    redo: editing(() => editor.redo()),
    pickColour: editing(() => { wb.tabs.show("trace"); wb.autoTrace.pickColour(); }),
    box: editing(() => { wb.tabs.show("trace"); wb.autoTrace.drawRegion("box"); }),
    polygon: editing(() => { wb.tabs.show("trace"); wb.autoTrace.drawRegion("polygon"); }),
    finish: () => {
      const tool = viewer.tool;
      if (!tool || !tool.finish) return false;
      tool.finish();
      return true;
    },
  };
}

function bindToolbar(wb) {
  const { viewer } = wb;
  const buttons = {
    home: () => viewer.home(),
    "zoom-in": () => viewer.zoomBy(1.4),
    "zoom-out": () => viewer.zoomBy(1 / 1.4),
    "rotate-left": () => viewer.rotateBy(-15),
    "rotate-right": () => viewer.rotateBy(15),
    "rotate-reset": () => viewer.resetRotation(),
    loupe: () => wb.loupe.toggle(),
    help: () => document.querySelector("[data-help-dialog]").showModal(),
  };
  for (const [name, run] of Object.entries(buttons)) {
    root.querySelector(`.wb-tools [data-action="${name}"]`).addEventListener("click", run);
  }
  const rotation = root.querySelector("[data-rotation]");
  wb.bus.addEventListener("rotation", (event) => { rotation.textContent = `${Math.round(event.detail)}°`; });
  wb.bus.addEventListener("loupe", (event) => {
    root.querySelector('.wb-tools [data-action="loupe"]').setAttribute("aria-pressed", String(event.detail));
  });
  wb.bus.addEventListener("tool", () => wb.overlay.requestDraw());
  wb.bus.addEventListener("tab", () => wb.overlay.requestDraw());
  document.addEventListener("keydown", (event) => {
    if (event.key === "Backspace" && wb.viewer.tool && wb.viewer.tool.back && !event.target.closest("input, textarea, select")) {
      wb.viewer.tool.back();
      event.preventDefault();
    }
  }, { capture: true });
}

// For the browser tests and the redraw measurement; harmless in normal use.
function exposeHook(wb) {
  window.tracedeskWorkbench = {
    imageToPage(u, v) {
      const t = wb.viewer.transform();
      const rect = wb.viewer.element.getBoundingClientRect();
      return { x: rect.left + t.ox + t.ux * u + t.vx * v, y: rect.top + t.oy + t.uy * u + t.vy * v };
    },
    showImageRect: (u0, v0, u1, v1) => wb.viewer.showImageRect(u0, v0, u1, v1, true),
    rotateTo(degrees) { wb.viewer.osd.viewport.setRotation(degrees, true); },
    // Median time (ms) of a full overlay redraw, optionally drawing only one trace (selected, with handles).
    timeRedraw(repeats = 20, onlyId = null) {
      const others = wb.store.all().map((entry) => entry.data.id).filter((id) => onlyId !== null && id !== onlyId);
      for (const id of others) wb.store.hidden.add(id);
      if (onlyId !== null) wb.store.select(onlyId);
      const times = [];
      const context = wb.overlay.canvas.getContext("2d");
      for (let k = 0; k < 3; k += 1) wb.overlay.drawNow(); // warm up (first draws compile and allocate)
      for (let k = 0; k < repeats; k += 1) {
        const start = performance.now();
        wb.overlay.drawNow();
        context.getImageData(0, 0, 1, 1); // make the canvas rasterise now, so the time includes the pixels
        times.push(performance.now() - start);
      }
      for (const id of others) wb.store.hidden.delete(id);
      times.sort((a, b) => a - b);
      const drawn = wb.store.all().filter((entry) => onlyId === null || entry.data.id === onlyId);
      const vertices = drawn.reduce((sum, entry) => sum + entry.vertices.length, 0);
      return { median_ms: times[Math.floor(times.length / 2)], max_ms: times[times.length - 1], repeats, vertices };
    },
    traces: () => wb.store.all().map((entry) => ({ id: entry.data.id, version: entry.data.version, vertices: entry.vertices })),
    // The view for the pan/zoom measurement: screen px per image px, and whether every tile in view is drawn.
    view() {
      const item = wb.viewer.osd.world.getItemAt(0);
      const t = wb.viewer.transform();
      return { scale: t ? t.scale : null, tilesLoaded: Boolean(item && item.getFullyLoaded()), animating: wb.viewer.osd.isAnimating() };
    },
  };
}

async function start() {
  const wb = buildCore();
  buildPanels(wb);
  bindToolbar(wb);
  bindShortcuts({ actions: keyActions(wb), dialog: document.querySelector("[data-help-dialog]") });
  wb.bus.addEventListener("calibration-saved", async () => {
    for (const entry of wb.store.all()) await wb.store.reload(entry.data.id);
  });
  window.addEventListener("beforeunload", (event) => {
    if (wb.store.all().some((entry) => entry.pending.size)) event.preventDefault();
  });
  root.dataset.enhanced = "true";
  exposeHook(wb);
  await wb.store.load();
  const first = wb.store.all()[0];
  if (first) wb.store.select(first.data.id);
  if (wb.canEdit) wb.autosave.describe();
  wb.viewer.osd.addOnceHandler("open", () => { root.dataset.ready = "true"; });
  if (wb.viewer.osd.world.getItemCount()) root.dataset.ready = "true";
}

start();
