// Editing the selected trace by hand. Four tools of our own:
//   move    drag a vertex (click one to select it; Delete removes it; arrows nudge it by a screen pixel)
//   extend  click to add a vertex after the last one (Shift+click: before the first); vertices stay draggable
//   insert  click near a segment to add a vertex in it
//   erase   drag a rectangle: the vertices inside it are removed (a stretch of the line)
// Every finished edit is one undo step and is saved automatically.
const HIT_PX = 8;
const SEGMENT_PX = 14;

const TOOL_HINTS = {
  move: "Drag a vertex to move it; click one to select it (Delete removes it, arrows nudge it).",
  extend: "Click to add vertices after the last one; Shift+click adds before the first.",
  insert: "Click near the line to add a vertex in that segment.",
  erase: "Drag a rectangle over the stretch to remove.",
};

function screen(t, [u, v]) {
  return [t.ox + t.ux * u + t.vx * v, t.oy + t.uy * u + t.vy * v];
}

function nearestVertex(vertices, point) {
  let best = -1;
  let bestDistance = HIT_PX;
  for (let k = 0; k < vertices.length; k += 1) {
    const [x, y] = screen(point.t, vertices[k]);
    const distance = Math.abs(x - point.x) + Math.abs(y - point.y);
    if (distance < bestDistance * 1.4 && Math.hypot(x - point.x, y - point.y) < bestDistance) {
      best = k;
      bestDistance = Math.hypot(x - point.x, y - point.y);
    }
  }
  return best;
}

function nearestSegment(vertices, point) {
  let best = -1;
  let bestDistance = SEGMENT_PX;
  for (let k = 0; k + 1 < vertices.length; k += 1) {
    const [ax, ay] = screen(point.t, vertices[k]);
    const [bx, by] = screen(point.t, vertices[k + 1]);
    const length2 = (bx - ax) ** 2 + (by - ay) ** 2 || 1;
    const along = Math.min(1, Math.max(0, ((point.x - ax) * (bx - ax) + (point.y - ay) * (by - ay)) / length2));
    const distance = Math.hypot(point.x - (ax + along * (bx - ax)), point.y - (ay + along * (by - ay)));
    if (distance < bestDistance) { best = k; bestDistance = distance; }
  }
  return best;
}

const copy = (vertices) => vertices.map((p) => [p[0], p[1]]);

export function createTraceEditor({ store, viewer, overlay, history, autosave, hint, bus, handlesVisible }) {
  let selectedVertex = -1;
  let dragFrom = null;
  let dragIndex = -1;
  let eraseBox = null;

  const emit = () => bus.dispatchEvent(new CustomEvent("editor", { detail: { selectedVertex } }));

  function commit(before, after, what) {
    const entry = store.selected;
    history.record(entry.data.id, before, after, what);
    store.change(entry.data.id, "vertices", after);
    autosave.schedule(entry.data.id);
    overlay.requestDraw();
    emit();
  }

  function selectVertex(index) {
    selectedVertex = index;
    overlay.requestDraw();
    emit();
  }

  const grab = {
    press(point) {
      const entry = store.selected;
      if (!entry) return false;
      dragIndex = nearestVertex(entry.vertices, point);
      if (dragIndex < 0) return false;
      dragFrom = copy(entry.vertices);
      entry.vertices = copy(entry.vertices);
      selectVertex(dragIndex);
      return true;
    },
    drag(point) {
      store.selected.vertices[dragIndex] = [point.u, point.v];
      overlay.requestDraw();
    },
    release() {
      const entry = store.selected;
      const moved = dragFrom[dragIndex][0] !== entry.vertices[dragIndex][0] || dragFrom[dragIndex][1] !== entry.vertices[dragIndex][1];
      if (moved) commit(dragFrom, entry.vertices, "move a vertex");
      else entry.vertices = dragFrom;
      dragFrom = null;
    },
  };

  const tools = {
    move: { ...grab, name: "move", label: "select and move vertices", click(point) {
      const entry = store.selected;
      if (entry) selectVertex(nearestVertex(entry.vertices, point));
    } },
    extend: { ...grab, name: "extend", label: "add vertices at the end", click(point, event) {
      const entry = store.selected;
      if (!entry) return;
      const hit = nearestVertex(entry.vertices, point);
      if (hit >= 0) { selectVertex(hit); return; }
      const before = entry.vertices;
      const vertex = [point.u, point.v];
      const prepend = event.shift || (event.originalEvent && event.originalEvent.shiftKey);
      const after = prepend ? [vertex, ...copy(before)] : [...copy(before), vertex];
      selectedVertex = prepend ? 0 : after.length - 1;
      commit(before, after, "add a vertex");
    } },
    insert: { ...grab, name: "insert", label: "insert vertices", click(point) {
      const entry = store.selected;
      if (!entry) return;
      const hit = nearestVertex(entry.vertices, point);
      if (hit >= 0) { selectVertex(hit); return; }
      const segment = nearestSegment(entry.vertices, point);
      if (segment < 0) { hint.show("No segment near that point: click closer to the line. Esc ends."); return; }
      const after = copy(entry.vertices);
      after.splice(segment + 1, 0, [point.u, point.v]);
      selectedVertex = segment + 1;
      commit(entry.vertices, after, "insert a vertex");
    } },
    erase: { name: "erase", label: "erase a stretch",
      press(point) { eraseBox = [point.x, point.y, point.x, point.y]; return Boolean(store.selected); },
      drag(point) { eraseBox[2] = point.x; eraseBox[3] = point.y; overlay.requestDraw(); },
      release(point) {
        const entry = store.selected;
        const [x0, y0] = [Math.min(eraseBox[0], eraseBox[2]), Math.min(eraseBox[1], eraseBox[3])];
        const [x1, y1] = [Math.max(eraseBox[0], eraseBox[2]), Math.max(eraseBox[1], eraseBox[3])];
        eraseBox = null;
        const after = entry.vertices.filter((vertex) => {
          const [x, y] = screen(point.t, vertex);
          return x < x0 || x > x1 || y < y0 || y > y1;
        });
        if (after.length !== entry.vertices.length) {
          selectedVertex = -1;
          commit(entry.vertices, after, `erase ${entry.vertices.length - after.length} vertices`);
        } else overlay.requestDraw();
      },
      cancel() { eraseBox = null; overlay.requestDraw(); } },
  };

  function use(name) {
    if (!store.selected) { hint.show("Select a trace first."); return; }
    const tool = tools[name];
    viewer.setTool(viewer.tool === tool ? null : tool);
    if (viewer.tool === tool) hint.show(`${TOOL_HINTS[name]} Esc ends.`);
    else hint.clear();
  }

  function apply(step) {
    if (!step) return false;
    const entry = store.selected;
    store.change(entry.data.id, "vertices", step.vertices);
    selectedVertex = Math.min(selectedVertex, step.vertices.length - 1);
    autosave.schedule(entry.data.id);
    overlay.requestDraw();
    emit();
    return true;
  }

  bus.addEventListener("selection", () => { selectedVertex = -1; emit(); });

  return {
    tools,
    use,
    get selectedVertex() { return selectedVertex; },
    handlesVisible,
    undo: () => Boolean(store.selected) && apply(history.undo(store.selectedId)),
    redo: () => Boolean(store.selected) && apply(history.redo(store.selectedId)),
    canUndo: () => Boolean(store.selected) && history.canUndo(store.selectedId),
    canRedo: () => Boolean(store.selected) && history.canRedo(store.selectedId),
    deleteVertex() {
      const entry = store.selected;
      if (!entry || selectedVertex < 0) return false;
      const after = copy(entry.vertices);
      after.splice(selectedVertex, 1);
      selectedVertex = Math.min(selectedVertex, after.length - 1);
      commit(entry.vertices, after, "delete a vertex");
      return true;
    },
    nudge(dx, dy) {
      const entry = store.selected;
      const t = viewer.transform();
      if (!entry || selectedVertex < 0 || !t) return false;
      // dx, dy are screen pixels; turn them into image pixels through the inverse transform.
      const du = (t.vy * dx - t.vx * dy) / t.det;
      const dv = (-t.uy * dx + t.ux * dy) / t.det;
      const after = copy(entry.vertices);
      after[selectedVertex] = [after[selectedVertex][0] + du, after[selectedVertex][1] + dv];
      commit(entry.vertices, after, "nudge a vertex");
      return true;
    },
    drawGuides(context) {
      if (!eraseBox) return;
      context.fillStyle = "rgba(201,42,42,0.12)";
      context.strokeStyle = "#c92a2a";
      context.setLineDash([4, 3]);
      context.lineWidth = 1.5;
      const [x0, y0, x1, y1] = eraseBox;
      context.fillRect(Math.min(x0, x1), Math.min(y0, y1), Math.abs(x1 - x0), Math.abs(y1 - y0));
      context.strokeRect(Math.min(x0, x1), Math.min(y0, y1), Math.abs(x1 - x0), Math.abs(y1 - y0));
      context.setLineDash([]);
    },
  };
}
