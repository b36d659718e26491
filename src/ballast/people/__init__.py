"""Work people do that makes the verdict worth trusting: writing real questions about sampled
passages (write.py) and judging pooled search results (judge.py). These modules keep the state
on disk after every answer (resumable, never asking twice); cli/ asks the questions."""
