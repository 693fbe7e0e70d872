"""Job execution and the numerical core of lacuna.

Layout (imports point one way only):

- ``workers.spec``: pydantic models of the contract (requests, results, queue payloads).
- ``workers.core``: pure functions on numpy arrays; no I/O, no Flask, Redis, RQ or pydantic.
- ``workers.jobs``: the RQ entry point and the single ``execute`` used inline and on workers.
- ``workers.runner``: the ``lacuna worker`` process (RQ worker plus a killable compute child).
"""
