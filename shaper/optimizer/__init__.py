"""Stage 6, the optimisation: the jitted objective, the loops (scipy, optax) with their
stop rule, one start and many (in worker processes), checkpoints, signals, the watchdog.
"""
