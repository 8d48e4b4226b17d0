"""The hash-chained audit trail: recording events in the caller's transaction and verifying the chain."""
