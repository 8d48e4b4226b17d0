// "Save this calibration as a chart spec": the draft in the form (saved or not) becomes a named template that the
// next sheet of the same printed chart can start from, offered in this collection or in every collection.
import { ApiError, postJson } from "./api.js";
import { templateFromDraft } from "./chart-spec-draft.js";

export function bindSpecSave(panel, wb, drafts, picker) {
  const form = panel.querySelector("[data-spec-save]");
  const state = panel.querySelector("[data-spec-save-state]");
  const collectionId = Number(wb.root.dataset.collectionId);

  async function save(event) {
    event.preventDefault();
    const name = form.spec_name.value.trim();
    if (!name) {
      state.textContent = "Give the chart spec a name first.";
      form.spec_name.focus();
      return;
    }
    const draft = drafts.draft();
    if (draft.missing) { state.textContent = `Not saved: the calibration is not complete (${draft.missing}).`; return; }
    const body = {
      name,
      notes: form.spec_notes.value.trim(),
      collection_id: form.spec_shared.checked ? null : collectionId,
      calibration_template: templateFromDraft(draft.spec),
    };
    state.textContent = "Saving…";
    try {
      const spec = await postJson("/api/v1/chart-specs", body);
      picker.add(spec);
      form.spec_name.value = "";
      state.textContent = `Saved as chart spec “${spec.name}” (#${spec.id}); choose it on the next sheet of this chart.`;
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      state.textContent = `Not saved: ${error.message}`;
    }
  }

  form.addEventListener("submit", save);
  if (!wb.canEdit) for (const control of form.elements) control.disabled = true;
}
