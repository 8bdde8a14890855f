"""corpuskit: turn scattered text in a mostly-spoken language into a clean, documented corpus."""
__all__ = ["run", "load_corpus", "load_ledger", "load_report"]
__version__ = "0.1.0"


def __getattr__(name: str):
    # The API (and pandas with it) is imported on first use, not by every worker process.
    if name in __all__:
        from . import api
        return getattr(api, name)
    raise AttributeError(f"module 'corpuskit' has no attribute '{name}'")
