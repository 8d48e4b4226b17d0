// The four steps as tabs (WAI-ARIA tabs pattern: arrow keys move between tabs, one tab stop).
export function createTabs(root, bus) {
  const tabs = [...root.querySelectorAll("[role=tab]")];
  const panels = new Map(tabs.map((tab) => [tab.dataset.tab, document.getElementById(tab.getAttribute("aria-controls"))]));
  let active = tabs[0].dataset.tab;

  function show(name, focus = false) {
    active = name;
    for (const tab of tabs) {
      const on = tab.dataset.tab === name;
      tab.setAttribute("aria-selected", String(on));
      tab.tabIndex = on ? 0 : -1;
      panels.get(tab.dataset.tab).hidden = !on;
      if (on && focus) tab.focus();
    }
    bus.dispatchEvent(new CustomEvent("tab", { detail: name }));
  }

  for (const tab of tabs) {
    tab.addEventListener("click", () => show(tab.dataset.tab));
    tab.addEventListener("keydown", (event) => {
      const index = tabs.indexOf(tab);
      const step = { ArrowRight: 1, ArrowDown: 1, ArrowLeft: -1, ArrowUp: -1 }[event.key];
      if (step) {
        event.preventDefault();
        event.stopPropagation();
        show(tabs[(index + step + tabs.length) % tabs.length].dataset.tab, true);
      } else if (event.key === "Home" || event.key === "End") {
        event.preventDefault();
        show(tabs[event.key === "Home" ? 0 : tabs.length - 1].dataset.tab, true);
      }
    });
  }
  show(active);
  return { show, get active() { return active; }, names: tabs.map((tab) => tab.dataset.tab) };
}
