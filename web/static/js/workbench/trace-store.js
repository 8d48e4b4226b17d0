// The traces of the sheet as the page holds them: the server's record (TraceRead), its ETag, the vertices being
// edited here, which fields still need saving, and the colour each trace gets in the overlay.
import { getJson, request } from "./api.js";

// Overlay colours: distinct from each other and from the usual red, blue, green and black recorder inks at
// full strength, and readable on cream paper.
const PALETTE = ["#d9480f", "#0b7285", "#862e9c", "#2b8a3e", "#c2255c", "#e67700", "#1864ab", "#5c940d"];

export const etagOf = (trace) => `"trace-${trace.id}-v${trace.version}"`;

export function createTraceStore({ sheetId, bus }) {
  const entries = new Map();
  let selectedId = null;
  let reviewId = null;
  let colourIndex = 0;
  const hidden = new Set();

  const emit = (name, detail) => bus.dispatchEvent(new CustomEvent(name, { detail }));

  function put(data, etag) {
    const existing = entries.get(data.id);
    const entry = existing || { colour: PALETTE[colourIndex++ % PALETTE.length], changes: 0, pending: new Set() };
    entry.data = data;
    entry.etag = etag || etagOf(data);
    if (!existing || !entry.pending.has("vertices")) entry.vertices = data.vertices.map((p) => [p[0], p[1]]);
    entry.conflict = false;
    entries.set(data.id, entry);
    emit("traces", { id: data.id });
    return entry;
  }

  async function load() {
    const list = await getJson(`/api/v1/sheets/${sheetId}/traces`);
    for (const data of list) put(data);
    emit("traces", {});
  }

  async function reload(id) {
    const answer = await request("GET", `/api/v1/traces/${id}`);
    const entry = entries.get(id);
    if (entry) { entry.pending.clear(); entry.changes = 0; }
    return put(answer.data, answer.etag);
  }

  function select(id) {
    selectedId = id;
    emit("selection", { id });
  }

  function remove(id) {
    entries.delete(id);
    if (selectedId === id) select(null);
    if (reviewId === id) reviewId = null;
    emit("traces", { id, removed: true });
  }

  // A local change (vertices or a field); autosave picks it up.
  function change(id, field, value) {
    const entry = entries.get(id);
    if (!entry) return;
    if (field === "vertices") entry.vertices = value;
    else entry.data = { ...entry.data, [field]: value };
    entry.pending.add(field);
    entry.changes += 1;
    emit("trace-changed", { id, field });
  }

  function flagConflict(id) {
    const entry = entries.get(id);
    if (!entry) return;
    entry.conflict = true;
    emit("trace-changed", { id, field: "conflict" });
  }

  return {
    load,
    flagConflict,
    reload,
    put,
    select,
    remove,
    change,
    get: (id) => entries.get(id),
    all: () => [...entries.values()],
    hidden,
    get selectedId() { return selectedId; },
    get selected() { return selectedId === null ? null : entries.get(selectedId) || null; },
    get reviewId() { return reviewId; },
    set reviewId(id) { reviewId = id; emit("review", { id }); },
  };
}
