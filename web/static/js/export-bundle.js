// A bundle being built in the background: polls its job, moves the progress bar, and once the ZIP is stored shows
// the download link with the file's size and SHA-256 (or why the job failed). Without JavaScript the page
// refreshes itself every few seconds instead (a <noscript> refresh rendered by the server).
import { ApiError, getJson } from "./workbench/api.js";

const POLL_MS = 500;
const RUNNING = new Set(["queued", "running"]);
const sleep = (ms) => new Promise((resolve) => { setTimeout(resolve, ms); });
const percent = (fraction) => `${Math.round((fraction || 0) * 100)} %`;

// The same decimal units as the page's server-side rendering (Jinja's filesizeformat).
function sizeText(bytes) {
  if (bytes < 1000) return `${bytes} Bytes`;
  const units = ["kB", "MB", "GB", "TB"];
  let value = bytes;
  let unit = "";
  for (const next of units) {
    value /= 1000;
    unit = next;
    if (value < 1000) break;
  }
  return `${value.toFixed(1)} ${unit}`;
}

function describe(job) {
  if (job.status === "queued") return "Waiting for a worker…";
  if (job.status === "running") return `Building: ${job.message || "starting"}… (${percent(job.progress)})`;
  return job.status === "succeeded" ? "Ready." : "Failed.";
}

function showDone(root, result) {
  root.querySelector("[data-bundle-file]").textContent = `${result.file}, ${sizeText(result.bytes)}`;
  root.querySelector("[data-bundle-sha]").textContent = result.sha256;
  const skipped = root.querySelector("[data-bundle-skipped]");
  skipped.replaceChildren(...(result.skipped || []).map((reason) => {
    const item = document.createElement("li");
    item.textContent = `Left out: ${reason}`;
    return item;
  }));
  root.querySelector("[data-bundle-done]").hidden = false;
  root.querySelector("[data-bundle-link]").focus();
}

function showFailed(root, error) {
  const firstLine = (error || "no reason was recorded").trim().split("\n")[0];
  root.querySelector("[data-bundle-error]").textContent = firstLine;
  root.querySelector("[data-bundle-failed]").hidden = false;
}

async function follow(root) {
  const bar = root.querySelector("[data-bundle-progress]");
  const state = root.querySelector("[data-bundle-state]");
  let job = { status: root.dataset.status };
  if (!RUNNING.has(job.status)) return; // finished before the page was rendered: the server showed the outcome
  while (RUNNING.has(job.status)) {
    await sleep(POLL_MS);
    try {
      job = await getJson(`/api/v1/jobs/${root.dataset.bundleJob}`);
    } catch (error) {
      if (!(error instanceof ApiError)) throw error;
      state.textContent = `The server did not answer (${error.message}).`;
      if (error.status >= 400 && error.status < 500) return; // signed out or not ours any more: stop asking
      continue;
    }
    bar.value = job.progress;
    bar.textContent = percent(job.progress);
    state.textContent = describe(job);
  }
  root.dataset.status = job.status;
  if (job.status === "succeeded" && job.result) showDone(root, job.result);
  else if (job.status === "failed") showFailed(root, job.error);
}

const root = document.querySelector("[data-bundle-job]");
if (root) follow(root);
