"""Floor 8 (DEVELOPERS.md; above the API), reports: compare, verify, the preview report, figures, HTML pages and
mask files. Reports use the public API and the engine; they never compute a number a second way."""
