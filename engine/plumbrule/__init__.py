"""plumbrule: hedonic price regression for appraisers and assessors, inside the spreadsheet."""

__version__ = "0.1.0"

from plumbrule.errors import PlumbError  # noqa: E402,F401


def analyze(*args, **kwargs):
    """Run the full analysis; see :func:`plumbrule.analysis.analyze`."""
    from plumbrule.analysis import analyze as _analyze
    return _analyze(*args, **kwargs)
