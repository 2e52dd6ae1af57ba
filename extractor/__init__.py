"""Archive → drift-corrected global annual means → Gregory sensitivities, curvature, TCR.

The public entry point is `extractor.extract`; each step is its own module (see DEVELOPERS.md).
"""


def extract(*args, **kwargs):
    """Run a whole extraction (see `extractor.pipeline.extract`)."""
    from .pipeline import extract as _extract

    return _extract(*args, **kwargs)
