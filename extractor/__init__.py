"""Extractor stage: archive → drift-corrected global annual means → Gregory sensitivities, curvature, TCR.

From Python use `sensemble.extract` (settings checked, table and series returned); the batch entry it runs is
`sensemble.extractor.pipeline.extract`. Each step is its own module (see DEVELOPERS.md). Nothing is imported here,
so that `sensemble.extractor.settings` stays light for the config reader.
"""


def __getattr__(name):
    # `sensemble.extractor.extract` stays importable (the batch entry), loaded only when asked for
    if name == "extract":
        from .pipeline import extract

        return extract
    raise AttributeError(f"module sensemble.extractor has no attribute {name!r}")
