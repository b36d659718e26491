"""Query synthesis: generators that write queries, and the import of human questions."""

from .extractive import ict_queries, keyword_queries, synthesize
from .human import import_questions

__all__ = ["ict_queries", "import_questions", "keyword_queries", "synthesize"]
