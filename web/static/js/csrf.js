// The CSRF token of this session, rendered by the server into <meta name="csrf-token">.
export function csrfToken() {
  const meta = document.querySelector('meta[name="csrf-token"]');
  return meta ? meta.content : "";
}
