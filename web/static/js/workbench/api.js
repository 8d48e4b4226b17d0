// JSON over fetch: the session's CSRF token on changes, If-Match when an ETag is given, one error type with a
// readable message (FastAPI answers a string `detail`, or a list of field problems for malformed bodies).
import { csrfToken } from "../csrf.js";

export class ApiError extends Error {
  constructor(status, message, body) {
    super(message);
    this.name = "ApiError";
    this.status = status;
    this.body = body;
  }
}

function messageOf(body, status) {
  const detail = body && body.detail;
  if (typeof detail === "string") return detail;
  if (Array.isArray(detail) && detail.length) {
    return detail.map((item) => `${(item.loc || []).slice(1).join(".") || "request"}: ${item.msg}`).join("; ");
  }
  return `the server answered HTTP ${status}`;
}

export async function request(method, url, { body, etag, signal } = {}) {
  const headers = { Accept: "application/json" };
  if (body !== undefined) headers["Content-Type"] = "application/json";
  if (method !== "GET") headers["X-CSRF-Token"] = csrfToken();
  if (etag) headers["If-Match"] = etag;
  let response;
  try {
    response = await fetch(url, {
      method,
      headers,
      body: body === undefined ? undefined : JSON.stringify(body),
      credentials: "same-origin",
      signal,
    });
  } catch (error) {
    if (error.name === "AbortError") throw error;
    throw new ApiError(0, "the server could not be reached; check the connection and try again", null);
  }
  const type = response.headers.get("content-type") || "";
  const data = type.includes("json") ? await response.json() : await response.text();
  if (!response.ok) throw new ApiError(response.status, messageOf(data, response.status), data);
  return { data, etag: response.headers.get("etag"), status: response.status };
}

export const getJson = async (url, options) => (await request("GET", url, options)).data;
export const postJson = async (url, body, options) => (await request("POST", url, { ...options, body })).data;

export function query(params) {
  const search = new URLSearchParams();
  for (const [key, value] of Object.entries(params)) {
    if (value !== undefined && value !== null && value !== "") search.set(key, String(value));
  }
  return search.toString();
}
