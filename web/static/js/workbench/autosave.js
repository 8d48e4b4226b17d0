// Saving trace edits without a save button: a moment after the last change the changed fields go to the server
// with If-Match. If someone else saved the trace first (412), nothing is overwritten: the page says so plainly and
// offers to load their version or to keep these edits as a new trace.
import { ApiError, request } from "./api.js";

const DELAY_MS = 600;
const RETRY_BUSY_MS = 1500;

export function createAutosave({ store, status, conflicts, sheetId, history, onSaved }) {
  const timers = new Map();
  const running = new Map();

  function describe() {
    const entries = store.all();
    if (entries.some((e) => e.conflict)) return status.saving("Not saved: someone else changed a trace", "error");
    const failed = entries.find((e) => e.saveError);
    if (failed) return status.saving(`Not saved: ${failed.saveError}`, "error");
    if (running.size) return status.saving("Saving…", "busy");
    if (entries.some((e) => e.pending.size)) return status.saving("Unsaved changes", "busy");
    const entry = store.selected;
    return status.saving(entry ? `All changes saved (trace version ${entry.data.version})` : "All changes saved", "ok");
  }

  function schedule(id, delay = DELAY_MS) {
    clearTimeout(timers.get(id));
    timers.set(id, setTimeout(() => flush(id), delay));
    describe();
  }

  async function flush(id) {
    timers.delete(id);
    if (running.has(id)) { await running.get(id); return flush(id); }
    const entry = store.get(id);
    if (!entry || !entry.pending.size || entry.conflict) return undefined;
    const job = send(entry).finally(() => { running.delete(id); describe(); });
    running.set(id, job);
    describe();
    return job;
  }

  async function send(entry) {
    const id = entry.data.id;
    const fields = [...entry.pending];
    const body = {};
    for (const field of fields) body[field] = field === "vertices" ? entry.vertices : entry.data[field];
    const changesAtSend = entry.changes;
    try {
      const answer = await request("PATCH", `/api/v1/traces/${id}`, { body, etag: entry.etag });
      const editedMeanwhile = entry.changes !== changesAtSend;
      entry.saveError = null;
      if (!editedMeanwhile) entry.pending.clear();
      store.put(editedMeanwhile ? { ...answer.data, vertices: entry.vertices } : answer.data, answer.etag);
      if (editedMeanwhile) schedule(id);
      onSaved(id);
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      if (error.status === 412) { store.flagConflict(id); offerChoice(entry); return; }
      entry.saveError = error.message;
      // 503: the archive was too busy and stored nothing; the edits stay pending and go again shortly.
      if (error.status === 503) schedule(id, RETRY_BUSY_MS);
    }
  }

  function offerChoice(entry) {
    const id = entry.data.id;
    conflicts.show({
      text: `The trace “${entry.data.name}” was changed by someone else while you were editing it here. Your edits are still on this page; nothing was overwritten.`,
      copyLabel: "Keep my edits as a new trace",
      reload: async () => {
        history.forget(id);
        await store.reload(id);
        describe();
      },
      copy: async () => {
        const body = { name: `${entry.data.name} (my copy)`.slice(0, 120), unit: entry.data.unit, pen_color: entry.data.pen_color, vertices: entry.vertices };
        const answer = await request("POST", `/api/v1/sheets/${sheetId}/traces`, { body });
        history.forget(id);
        await store.reload(id);
        store.put(answer.data, answer.etag);
        store.select(answer.data.id);
        describe();
      },
      later: () => describe(),
    });
    describe();
  }

  return {
    schedule,
    flush,
    flushAll: () => Promise.all(store.all().map((entry) => flush(entry.data.id))),
    resolve(id) { const entry = store.get(id); if (entry && entry.conflict) offerChoice(entry); },
    describe,
  };
}
