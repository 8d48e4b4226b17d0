// Choosing a chart spec in the Calibrate panel. "Apply to this sheet" fills the draft with what the spec knows
// of the printed chart (a calibration saved as a spec brings its control points too, at the pixels of the sheet
// it came from: on a sheet scanned the same way they sit on the same marks). "Find its printed grid" asks the
// server to look for a spec's grid on this scan; what it finds is shown for review before it enters the draft.
import { ApiError, getJson } from "./api.js";
import { describeSpec, draftFromGeometry, FORM_KINDS, KIND_WORDS } from "./chart-spec-draft.js";
import { createProposal } from "./chart-spec-proposal.js";

export function createSpecPicker(panel, wb, drafts) {
  const choice = panel.querySelector("[data-spec-choice]");
  const applyButton = panel.querySelector('[data-action="apply-spec"]');
  const findButton = panel.querySelector('[data-action="find-grid"]');
  const note = panel.querySelector("[data-spec-note]");
  const introduction = note.textContent;
  // "Describe a printed grid" opens the chosen spec on the chart-spec page, or a new one when none is chosen.
  const gridLink = panel.querySelector("[data-spec-grid-link]");
  const gridPage = gridLink ? gridLink.pathname : "";
  const proposal = createProposal(panel, wb, drafts, { onClose: (accepted) => (accepted ? drafts.focusSave() : findButton.focus()) });

  const selected = () => (choice.value ? choice.selectedOptions[0] : null);

  function refresh() {
    const option = selected();
    applyButton.disabled = !wb.canEdit || !option;
    findButton.disabled = !wb.canEdit || !option || option.dataset.geometry !== "true";
    note.textContent = option ? describeSpec(option) : introduction;
    if (gridLink) gridLink.href = `${gridPage}${option ? `?spec=${option.value}` : ""}#grid-form`;
  }

  function fromTemplate(spec) {
    const template = spec.calibration_template;
    drafts.load(template, { keepStart: true });
    const count = (template.control_points || template.check_points || []).length;
    const points = count ? ` and its ${count} points, at the pixels of the sheet it was saved from: check that each sits on its printed mark here (drag it if not)` : "";
    return `Filled from “${spec.name}”: ${KIND_WORDS[template.kind]}, scales, units${points}.`;
  }

  function fromGeometry(spec) {
    const { spec: draft, armArcs } = draftFromGeometry(spec.geometry, drafts.current());
    drafts.load(draft, { keepPoints: true, keepStart: true });
    if (armArcs) { drafts.form.use_arm.checked = true; drafts.changed(); }
    return `Filled from “${spec.name}”: ${KIND_WORDS[draft.kind]} and its scales. Find its printed grid for the points, or place them by hand.`;
  }

  async function apply() {
    const option = selected();
    if (!option) return;
    try {
      const spec = await getJson(`/api/v1/chart-specs/${option.value}`);
      if (!FORM_KINDS.has(spec.kind)) {
        drafts.say(`“${spec.name}” is a ${KIND_WORDS[spec.kind] || spec.kind}, which this form cannot set up; use the API for it.`, "error");
        return;
      }
      note.textContent = spec.calibration_template ? fromTemplate(spec) : fromGeometry(spec);
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      drafts.say(`The chart spec could not be read: ${error.message}`, "error");
    }
  }

  choice.addEventListener("change", () => { proposal.discard(false); refresh(); });
  applyButton.addEventListener("click", apply);
  findButton.addEventListener("click", () => {
    const option = selected();
    if (option) proposal.find(Number(option.value), option.dataset.name);
  });
  refresh();

  return {
    // A spec saved from this page joins the list, chosen.
    add(spec) {
      const option = new Option(`${spec.name} (${KIND_WORDS[spec.kind] || spec.kind}${spec.collection_id === null ? ", all collections" : ""})`, String(spec.id));
      option.dataset.name = spec.name;
      option.dataset.kind = spec.kind;
      option.dataset.geometry = String(Boolean(spec.geometry));
      option.dataset.template = String(Boolean(spec.calibration_template));
      choice.append(option);
      choice.value = String(spec.id);
      refresh();
    },
  };
}
