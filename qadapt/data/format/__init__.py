"""The replay-dataset format: field schema, manifest, ``.npy`` files, content checks,
verification, episode bookkeeping, and reading a dataset (see docs/datasets.md)."""
