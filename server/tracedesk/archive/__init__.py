"""The archive: collections of scanned sheets, their uploads, derived images and metadata."""
