// Show only the parts of the printed-grid form that apply: the chosen kind of chart, the step or decade fields of
// each axis' scale, and the pen-arm lengths when time lines are arcs. Hidden fields are not sent.
export function bindSections(form) {
  function refresh() {
    const kind = form.elements.namedItem("kind").value;
    for (const section of form.querySelectorAll("[data-kind-section]")) section.hidden = section.dataset.kindSection !== kind;
    for (const section of form.querySelectorAll("[data-scale-section]")) {
      const scale = form.elements.namedItem(`${section.dataset.scaleSection}.scale`).value;
      section.hidden = !section.dataset.scales.split(" ").includes(scale);
    }
    form.querySelector("[data-arcs-section]").hidden = form.elements.namedItem("time_lines").value !== "arcs";
  }
  form.addEventListener("change", (event) => {
    if (event.target.matches('select[name="kind"], select[name$=".scale"], select[name="time_lines"]')) refresh();
  });
  refresh();
  return { refresh };
}

// The colour picker beside the grid colour's text field, both ways.
export function bindColourPickers(form) {
  for (const picker of form.querySelectorAll("[data-colour-for]")) {
    const input = form.elements.namedItem(picker.dataset.colourFor);
    const sync = () => { if (/^#[0-9a-f]{6}$/i.test(input.value.trim())) picker.value = input.value.trim().toLowerCase(); };
    picker.addEventListener("input", () => { input.value = picker.value; });
    input.addEventListener("input", sync);
    sync();
  }
}
