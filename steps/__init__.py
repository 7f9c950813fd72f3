"""corpusmill steps: the logic of each workflow stage as plain, importable functions."""
