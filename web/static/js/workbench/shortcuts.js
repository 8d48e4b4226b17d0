// Keyboard shortcuts of the workbench, and the help dialog that lists them (generated from the same table, so the
// list can never drift from what the keys do). Keys are ignored while typing in a field, except Esc.
const TYPING = new Set(["INPUT", "TEXTAREA", "SELECT"]);

// [group, keys shown, description, matcher, action name]
const SHORTCUTS = [
  ["Anywhere", "?", "show this list", (e) => e.key === "?", "help"],
  ["Anywhere", "1 2 3 4", "Calibrate, Trace, Fit, Data", (e) => ["1", "2", "3", "4"].includes(e.key), "tab"],
  ["Anywhere", "Esc", "leave the current tool", (e) => e.key === "Escape", "escape"],
  ["Anywhere", "Ctrl+S", "save now", (e) => (e.ctrlKey || e.metaKey) && e.key.toLowerCase() === "s", "save"],
  ["View", "= / -", "zoom in / out", (e) => e.key === "=" || e.key === "+" || e.key === "-", "zoom"],
  ["View", "0", "whole sheet", (e) => e.key === "0", "home"],
  ["View", "arrows", "pan (with a vertex or point selected: nudge it 1 px; Shift: 10 px)", (e) => e.key.startsWith("Arrow"), "arrow"],
  ["View", "[ / ]", "turn the view 15° anticlockwise / clockwise (Shift: 90°)", (e) => e.key === "[" || e.key === "]" || e.key === "{" || e.key === "}", "rotate"],
  ["View", "\\", "upright again", (e) => e.key === "\\", "upright"],
  ["View", "L", "loupe on / off", (e) => e.key.toLowerCase() === "l", "loupe"],
  ["Calibrate", "P", "place control points", (e) => e.key.toLowerCase() === "p", "place"],
  ["Trace", "N / Shift+N", "next / previous trace", (e) => e.key.toLowerCase() === "n", "nextTrace"],
  ["Trace", "V", "select and move vertices", (e) => e.key.toLowerCase() === "v", "move"],
  ["Trace", "A", "add vertices at the end (Shift+click: at the start)", (e) => e.key.toLowerCase() === "a", "extend"],
  ["Trace", "I", "insert a vertex in a segment", (e) => e.key.toLowerCase() === "i", "insert"],
  ["Trace", "X", "erase a stretch (drag a rectangle)", (e) => e.key.toLowerCase() === "x", "erase"],
  ["Trace", "Delete", "delete the selected vertex or control point", (e) => e.key === "Delete" || e.key === "Backspace", "delete"],
  ["Trace", "Ctrl+Z", "undo", (e) => (e.ctrlKey || e.metaKey) && !e.shiftKey && e.key.toLowerCase() === "z", "undo"],
  ["Trace", "Ctrl+Shift+Z or Ctrl+Y", "redo", (e) => (e.ctrlKey || e.metaKey) && ((e.shiftKey && e.key.toLowerCase() === "z") || e.key.toLowerCase() === "y"), "redo"],
  ["Find a line", "K", "pick the pen colour from the scan", (e) => e.key.toLowerCase() === "k", "pickColour"],
  ["Find a line", "B", "draw a search box", (e) => e.key.toLowerCase() === "b", "box"],
  ["Find a line", "G", "draw a search polygon", (e) => e.key.toLowerCase() === "g", "polygon"],
  ["Find a line", "Enter", "close the polygon, or finish clicking points", (e) => e.key === "Enter", "finish"],
];

function renderHelp(container) {
  const groups = new Map();
  for (const [group, keys, description] of SHORTCUTS) {
    if (!groups.has(group)) groups.set(group, []);
    groups.get(group).push([keys, description]);
  }
  container.replaceChildren();
  for (const [group, rows] of groups) {
    const section = document.createElement("section");
    const title = document.createElement("h3");
    title.textContent = group;
    const list = document.createElement("dl");
    list.className = "wb-keys";
    for (const [keys, description] of rows) {
      const dt = document.createElement("dt");
      for (const key of keys.split(" ")) {
        if (key === "/" || key === "or") { dt.append(` ${key} `); continue; }
        const kbd = document.createElement("kbd");
        kbd.textContent = key;
        dt.append(kbd);
      }
      const dd = document.createElement("dd");
      dd.textContent = description;
      list.append(dt, dd);
    }
    section.append(title, list);
    container.append(section);
  }
}

export function bindShortcuts({ actions, dialog }) {
  renderHelp(dialog.querySelector("[data-help-body]"));
  document.addEventListener("keydown", (event) => {
    if (event.defaultPrevented || event.altKey) return;
    const target = event.target;
    const typing = target && (TYPING.has(target.tagName) || target.isContentEditable);
    if (document.querySelector("dialog[open]") && event.key !== "Escape") return;
    for (const [, , , matches, name] of SHORTCUTS) {
      if (!matches(event)) continue;
      if (typing && name !== "escape" && name !== "save") return;
      if (!(event.ctrlKey || event.metaKey) && ["undo", "redo", "save"].includes(name)) continue;
      if ((event.ctrlKey || event.metaKey) && !["undo", "redo", "save"].includes(name)) continue;
      const handled = actions[name](event);
      if (handled !== false) event.preventDefault();
      return;
    }
  });
  return { open: () => dialog.showModal() };
}
