// The Trace panel: the list of traces (pick one to work on), the selected trace's name and unit, the hand-editing
// tools with undo and redo, a new hand-drawn trace, and withdrawing a trace with a reason.
import { ApiError, request } from "./api.js";

function traceButton(entry, selected) {
  const item = document.createElement("li");
  item.className = "wb-trace-item";
  const button = document.createElement("button");
  button.type = "button";
  button.className = "wb-trace-button";
  button.dataset.traceId = String(entry.data.id);
  button.setAttribute("aria-pressed", String(selected));
  const swatch = document.createElement("span");
  swatch.className = "wb-swatch";
  swatch.style.background = entry.colour;
  swatch.setAttribute("aria-hidden", "true");
  const name = document.createElement("span");
  name.className = "wb-trace-name";
  name.textContent = entry.data.name;
  const meta = document.createElement("span");
  meta.className = "wb-trace-meta";
  const unsaved = entry.conflict ? " · not saved" : entry.pending.size ? " · saving" : "";
  meta.textContent = `${entry.vertices.length.toLocaleString("en")} vertices · ${entry.data.origin} · v${entry.data.version}${unsaved}`;
  button.append(swatch, name, meta);
  item.append(button);
  return item;
}

export function createTracePanel(panel, wb) {
  const { store, editor } = wb;
  const list = panel.querySelector("[data-trace-list]");
  const details = panel.querySelector("[data-selected-trace]");
  const info = panel.querySelector("[data-vertex-info]");
  const withdrawDialog = document.querySelector("[data-withdraw-dialog]");

  function renderList() {
    list.replaceChildren(...store.all().map((entry) => traceButton(entry, entry.data.id === store.selectedId)));
    if (!store.all().length) {
      const empty = document.createElement("li");
      empty.className = "muted";
      empty.textContent = "No traces yet: find one automatically or start one by hand below.";
      list.append(empty);
    }
  }

  function renderSelected() {
    const entry = store.selected;
    details.hidden = !entry;
    if (!entry) return;
    for (const input of details.querySelectorAll("[data-trace-field]")) {
      if (document.activeElement !== input) input.value = entry.data[input.dataset.traceField] || "";
    }
    renderButtons();
  }

  function renderButtons() {
    const entry = store.selected;
    panel.querySelector('[data-action="undo"]').disabled = !wb.canEdit || !editor.canUndo();
    panel.querySelector('[data-action="redo"]').disabled = !wb.canEdit || !editor.canRedo();
    panel.querySelector('[data-action="delete-vertex"]').disabled = !wb.canEdit || editor.selectedVertex < 0;
    const vertex = entry && editor.selectedVertex >= 0 ? entry.vertices[editor.selectedVertex] : null;
    info.textContent = vertex ? `vertex ${editor.selectedVertex + 1} of ${entry.vertices.length} at (${vertex[0].toFixed(1)}, ${vertex[1].toFixed(1)})` : "";
    for (const button of panel.querySelectorAll("[data-edit-tool]")) {
      button.setAttribute("aria-pressed", String(Boolean(wb.viewer.tool) && wb.viewer.tool.name === button.dataset.editTool));
    }
  }

  list.addEventListener("click", (event) => {
    const button = event.target.closest("[data-trace-id]");
    if (button) store.select(Number(button.dataset.traceId));
  });
  for (const input of details.querySelectorAll("[data-trace-field]")) {
    input.addEventListener("change", () => {
      const value = input.value.trim();
      if (!store.selected || (input.dataset.traceField === "name" && !value)) return;
      store.change(store.selectedId, input.dataset.traceField, value);
      wb.autosave.schedule(store.selectedId, 0);
    });
  }
  for (const button of panel.querySelectorAll("[data-edit-tool]")) {
    button.addEventListener("click", () => editor.use(button.dataset.editTool));
  }
  panel.querySelector('[data-action="undo"]').addEventListener("click", () => editor.undo());
  panel.querySelector('[data-action="redo"]').addEventListener("click", () => editor.redo());
  panel.querySelector('[data-action="delete-vertex"]').addEventListener("click", () => editor.deleteVertex());
  panel.querySelector('[data-action="withdraw-trace"]').addEventListener("click", () => {
    withdrawDialog.querySelector("form").reset();
    withdrawDialog.showModal();
  });
  withdrawDialog.addEventListener("close", async () => {
    const reason = withdrawDialog.querySelector('input[name="reason"]').value.trim();
    const entry = store.selected;
    if (withdrawDialog.returnValue !== "withdraw" || !reason || !entry) return;
    try {
      await wb.autosave.flush(entry.data.id);
      await request("DELETE", `/api/v1/traces/${entry.data.id}?reason=${encodeURIComponent(reason)}`, { etag: entry.etag });
      store.remove(entry.data.id);
      wb.status.saving(`Trace “${entry.data.name}” withdrawn`, "ok");
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      wb.status.saving(`Not withdrawn: ${error.message}`, "error");
    }
  });

  panel.querySelector("[data-new-trace]").addEventListener("submit", async (event) => {
    event.preventDefault();
    const form = event.target;
    try {
      const body = { name: form.elements.name.value.trim(), unit: form.elements.unit.value.trim(), vertices: [] };
      const answer = await request("POST", `/api/v1/sheets/${wb.sheetId}/traces`, { body });
      store.put(answer.data, answer.etag);
      store.select(answer.data.id);
      form.reset();
      panel.querySelector("[data-new-trace-fold]").open = false;
      editor.use("extend");
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      wb.status.saving(`Not created: ${error.message}`, "error");
    }
  });

  wb.bus.addEventListener("traces", () => { renderList(); renderSelected(); });
  wb.bus.addEventListener("trace-changed", () => { renderList(); renderButtons(); });
  wb.bus.addEventListener("selection", () => { renderList(); renderSelected(); wb.overlay.requestDraw(); });
  wb.bus.addEventListener("editor", renderButtons);
  wb.bus.addEventListener("tool", renderButtons);
  if (!wb.canEdit) for (const control of panel.querySelectorAll("input, button:not(.wb-trace-button), select")) control.disabled = true;
  renderList();
  return { renderList };
}
