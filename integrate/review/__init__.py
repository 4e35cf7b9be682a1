"""Reviewing suspected duplicates: the decision store, the review queue, the page and the terminal mode.

``store`` (decisions in the state database) and ``apply`` (decisions inside a run) need only the
core dependencies; ``app`` (the review page) needs the ``review`` extra (FastAPI, uvicorn).
"""
