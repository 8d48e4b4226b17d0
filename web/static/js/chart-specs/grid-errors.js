// The server's refusals beside the form. Its messages start with the path of the field ("x_axis.frame[1]: ...",
// "pen_colours[2]: ..."); the fields that path names are marked invalid and described by the message.
const LEADING_PATH = /^([A-Za-z_][\w.[\]]*): /;

function fieldsOf(form, path) {
  const fields = [...form.querySelectorAll("[data-path]")].filter((input) => !input.closest("[hidden]"));
  const exact = fields.filter((input) => input.dataset.path === path);
  if (exact.length) return exact;
  const inside = fields.filter((input) => input.dataset.path.startsWith(`${path}[`) || input.dataset.path.startsWith(`${path}.`));
  if (inside.length) return inside;
  return fields.filter((input) => path.startsWith(`${input.dataset.path}[`) || path.startsWith(`${input.dataset.path}.`));
}

export function createErrors(form) {
  const box = form.querySelector("[data-grid-errors]");

  function clear() {
    box.hidden = true;
    box.textContent = "";
    for (const input of form.querySelectorAll('[aria-invalid="true"]')) {
      input.removeAttribute("aria-invalid");
      input.setAttribute("aria-describedby", input.dataset.describedBy || "");
      if (!input.dataset.describedBy) input.removeAttribute("aria-describedby");
    }
  }

  function mark(input) {
    input.setAttribute("aria-invalid", "true");
    input.dataset.describedBy = input.getAttribute("aria-describedby") || "";
    input.setAttribute("aria-describedby", `${input.dataset.describedBy} ${box.id}`.trim());
  }

  // Show one problem (``intro``: what did not happen); marks the named fields and focuses the first of them.
  function show(intro, message) {
    clear();
    box.textContent = `${intro} ${message}`;
    box.hidden = false;
    const paths = message.split("; ").map((part) => (LEADING_PATH.exec(part) || [])[1]).filter(Boolean);
    const fields = paths.flatMap((path) => fieldsOf(form, path));
    fields.forEach(mark);
    (fields[0] || box).focus();
  }

  box.id = box.id || "cs-errors";
  return { show, clear };
}
