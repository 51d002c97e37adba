"""Test-set studies: manifests, job expansion, resumable execution, aggregation."""
