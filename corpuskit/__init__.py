"""corpuskit: turn scattered text in a mostly-spoken language into a clean, documented corpus."""
from .api import load_corpus, load_ledger, load_report, run

__all__ = ["run", "load_corpus", "load_ledger", "load_report"]
__version__ = "0.1.0"
