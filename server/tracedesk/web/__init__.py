"""Shared HTTP plumbing: request-scoped database sessions, the current principal, CSRF, ETags, templates."""
