"""The integration service: ``integrate serve WS [WS...]``, an HTTP API over the same functions
as the command line (the pipeline, the state store, the review store).

- ``app.create_app``: the FastAPI app (routes in ``app`` and ``review_api``).
- ``server.serve``: bind (refusing an address in use or a non-loopback one without tokens), then
  run uvicorn until interrupted.
- ``store``: the service's own tables in the state database (jobs, tokens).
- ``worker``: one run job in a process of its own.
"""
