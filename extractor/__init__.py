"""Extractor stage: archive → drift-corrected global annual means → Gregory sensitivities, curvature, TCR.

From Python use `sensemble.extract` (settings checked, table and series returned); the batch entry it runs is
`sensemble.extractor.pipeline.extract`. Each step is its own module (see DEVELOPERS.md). Nothing is imported here,
so that `sensemble.extractor.settings` stays light for the config reader.
"""
