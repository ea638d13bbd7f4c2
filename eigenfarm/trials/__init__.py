"""Trying solver settings on a user's own Hessian store before spending cluster hours (``eigenfarm gauge``).

Each setting of a grid runs as the real ``eigenfarm solve`` command in a child process, watched for wall
time and memory (:mod:`~eigenfarm.trials.watch`); dense LAPACK and plain scipy ``eigsh`` run the same way
as references (:mod:`~eigenfarm.trials.reference`); the rows go into a table with ratios and plots
(:mod:`~eigenfarm.trials.table`).
"""
