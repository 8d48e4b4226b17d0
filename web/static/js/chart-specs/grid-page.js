// The chart-spec page: open a listed spec in the printed-grid form, save it (POST a new spec, PATCH an open one
// with If-Match on the version read), and show the server's refusal beside the form when it does not save.
import { ApiError, postJson, request } from "../workbench/api.js";
import { createErrors } from "./grid-errors.js";
import { fillForm, geometryFromForm, unreadableNumbers } from "./grid-geometry.js";
import { bindColourPickers, bindSections } from "./grid-sections.js";
import { bindTry } from "./grid-try.js";

const form = document.querySelector("[data-grid-form]");
const collectionId = Number(form.dataset.collectionId);
const pageUrl = `/collections/${collectionId}/chart-specs`;
const title = document.querySelector("[data-form-title]");
const state = form.querySelector("[data-form-state]");
const saveState = form.querySelector("[data-save-state]");
const newOnly = form.querySelector("[data-new-only]");
const introduction = state.textContent;
const sections = bindSections(form);
const errors = createErrors(form);
// The spec open in the form (null: a new one), its ETag and its stored geometry.
let open = null;

function startNew() {
  open = null;
  form.reset();
  fillForm(form, {});
  sections.refresh();
  errors.clear();
  newOnly.hidden = false;
  title.textContent = "Describe a printed grid";
  state.textContent = introduction;
  saveState.textContent = "";
  for (const row of document.querySelectorAll("[data-spec-row]")) row.removeAttribute("aria-current");
}

function showOpen(spec) {
  const where = spec.collection_id === null ? "shared with all collections" : "this collection's";
  title.textContent = `Printed grid of “${spec.name}”`;
  state.textContent = spec.geometry
    ? `Version ${spec.version}, ${where}. Saving makes version ${spec.version + 1}.`
    : `Version ${spec.version}, ${where}: it holds a calibration template but no printed grid yet; describe the grid and save.`;
  for (const row of document.querySelectorAll("[data-spec-row]")) {
    if (row.dataset.specRow === String(spec.id)) row.setAttribute("aria-current", "true");
    else row.removeAttribute("aria-current");
  }
}

async function openSpec(id) {
  try {
    const { data, etag } = await request("GET", `/api/v1/chart-specs/${id}`);
    open = { id: data.id, etag, geometry: data.geometry || {}, version: data.version };
    errors.clear();
    form.elements.namedItem("name").value = data.name;
    form.elements.namedItem("notes").value = data.notes;
    if (!data.geometry) form.elements.namedItem("kind").value = data.kind;
    fillForm(form, data.geometry || { kind: data.kind });
    newOnly.hidden = true;
    sections.refresh();
    showOpen(data);
  } catch (error) {
    if (!(error instanceof ApiError)) throw error;
    errors.show("The chart spec could not be read:", error.message);
  }
}

const geometry = () => geometryFromForm(form, open ? open.geometry : {});

function refusal(error) {
  if (error.status === 412 || error.status === 428) {
    return ["Not saved:", "someone saved this chart spec after you opened it. Copy what you entered, open it again from the list, and re-enter your change."];
  }
  if (error.status === 403) return ["Not saved:", "your role may not change chart specs."];
  return ["Not saved:", error.message];
}

async function save(event) {
  event.preventDefault();
  errors.clear();
  const unreadable = unreadableNumbers(form);
  if (unreadable.length) {
    errors.show("Not saved:", unreadable.map((input) => `${input.dataset.path}: not a number`).join("; "));
    return;
  }
  const name = form.elements.namedItem("name").value.trim();
  if (!name) { errors.show("Not saved:", "name: give the chart spec a name."); return; }
  const notes = form.elements.namedItem("notes").value;
  saveState.textContent = "Saving…";
  try {
    const body = { name, notes, geometry: geometry() };
    const saved = open
      ? (await request("PATCH", `/api/v1/chart-specs/${open.id}`, { body, etag: open.etag })).data
      : await postJson("/api/v1/chart-specs", { ...body, collection_id: form.elements.namedItem("shared").checked ? null : collectionId });
    window.location.assign(`${pageUrl}?spec=${saved.id}&saved=${saved.version}#grid-form`);
  } catch (error) {
    if (!(error instanceof ApiError)) throw error;
    saveState.textContent = "";
    errors.show(...refusal(error));
  }
}

async function start() {
  bindColourPickers(form);
  bindTry(form, { geometry, errors });
  form.addEventListener("submit", save);
  form.querySelector("[data-new-spec]").addEventListener("click", startNew);
  for (const link of document.querySelectorAll("[data-open-spec]:not(form)")) {
    link.addEventListener("click", (event) => {
      event.preventDefault();
      window.history.replaceState(null, "", link.href);
      openSpec(link.dataset.openSpec).then(() => form.scrollIntoView());
    });
  }
  const params = new URLSearchParams(window.location.search);
  if (form.dataset.openSpec) await openSpec(form.dataset.openSpec);
  if (open && params.get("saved")) saveState.textContent = `Saved as version ${params.get("saved")}.`;
  form.dataset.ready = "true";
}

start();
