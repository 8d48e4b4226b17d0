// Review page: click the sheet picture to pin a new comment there. The position is sent in sheet pixels
// (origin at the top-left corner of the image, ARCHITECTURE.md), whatever size the picture is shown at.
function placeDraftPin(board, u, v, width, height) {
  let pin = board.querySelector(".pin.draft");
  if (!pin) {
    pin = document.createElement("span");
    pin.className = "pin draft";
    pin.textContent = "+";
    pin.setAttribute("aria-hidden", "true");
    board.append(pin);
  }
  pin.style.left = `${(100 * u) / width}%`;
  pin.style.top = `${(100 * v) / height}%`;
}

for (const board of document.querySelectorAll("[data-review-pins]")) {
  const image = board.querySelector("img");
  const form = document.querySelector("[data-pin-form]");
  if (!image || !form) continue;
  const width = Number(board.dataset.sheetWidth);
  const height = Number(board.dataset.sheetHeight);
  board.classList.add("pinnable");
  image.addEventListener("click", (event) => {
    const box = image.getBoundingClientRect();
    const u = ((event.clientX - box.left) / box.width) * width;
    const v = ((event.clientY - box.top) / box.height) * height;
    form.querySelector("[data-pin-u]").value = u.toFixed(1);
    form.querySelector("[data-pin-v]").value = v.toFixed(1);
    placeDraftPin(board, u, v, width, height);
    form.querySelector("textarea").focus();
  });
}
