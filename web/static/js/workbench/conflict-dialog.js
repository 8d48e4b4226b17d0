// The one dialog for "someone else changed this record": load their version, keep mine as a copy, or decide
// later. Each caller says what "keep a copy" means for its record.
export function createConflictDialog(dialog) {
  const text = dialog.querySelector("[data-conflict-text]");
  const copyButton = dialog.querySelector("[data-conflict-copy-label]");
  let handlers = null;

  for (const button of dialog.querySelectorAll("[data-conflict-choice]")) {
    button.addEventListener("click", async () => {
      const chosen = handlers && handlers[button.dataset.conflictChoice];
      dialog.close();
      handlers = null;
      if (chosen) await chosen();
    });
  }
  dialog.addEventListener("cancel", () => {
    const later = handlers && handlers.later;
    handlers = null;
    if (later) later();
  });

  return {
    show({ text: message, copyLabel, reload, copy, later }) {
      handlers = { reload, copy, later };
      text.textContent = message;
      copyButton.textContent = copyLabel || "Keep mine as a copy";
      if (!dialog.open) dialog.showModal();
      dialog.querySelector('[data-conflict-choice="reload"]').focus();
    },
  };
}
