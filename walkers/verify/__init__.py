"""Stage 7, verify: closed-form solutions (:mod:`walkers.verify.analytic`) and the verification
cases behind ``walkers verify`` and the tests (:mod:`walkers.verify.cases`).

May import: the base and the stages before it (``scenario`` to ``ensemble``).
"""
