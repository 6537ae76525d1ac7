"""Stage 1, the physics: pure functions of arrays, no recipe, no files.

- :mod:`~shaper.physics.systems`: transmon, coupled transmons, any system from matrices;
  names and Hermiticity checked (NumPy only);
- :mod:`~shaper.physics.targets`: target gates and state transfers;
- :mod:`~shaper.physics.propagator`: the piecewise-constant propagator (JAX, exact
  derivative);
- :mod:`~shaper.physics.figures`: fidelity, leakage, virtual Z frame angles;
- :mod:`~shaper.physics.simulation`: re-simulating a finished waveform;
- :mod:`~shaper.physics.grid`: the sub-step grid of IF-modulated samples.

Importing the JAX modules turns on float64 (:mod:`~shaper.physics._jax`).
"""
