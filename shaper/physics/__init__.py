"""Stage 1, the physics: pure functions of arrays, no recipe, no files.

- :mod:`~shaper.physics.systems`: transmon, coupled transmons, any system from matrices;
  names and Hermiticity checked (NumPy only);
- :mod:`~shaper.physics.targets`: target gates and state transfers;
- :mod:`~shaper.physics.propagator`: the piecewise-constant propagator (JAX, exact
  derivative);
- :mod:`~shaper.physics.figures`: fidelity, leakage, virtual Z frame angles;
- :mod:`~shaper.physics.simulation`: re-simulating a finished waveform (rotating frame,
  open system); :mod:`~shaper.physics.lab_simulation`: the same in the lab frame, and the
  worst carrier phase; :mod:`~shaper.physics.effective`, :mod:`~shaper.physics.corrected`:
  the lab frame to second order (the optimiser's default model, the phase search's guide,
  a played file's whole map);
- predicted benchmarking: :mod:`~shaper.physics.clifford`,
  :mod:`~shaper.physics.clifford_pairs`, :mod:`~shaper.physics.gate_maps`,
  :mod:`~shaper.physics.benchmarking`, :mod:`~shaper.physics.benchmarking_pairs`,
  :mod:`~shaper.physics.interleaved`, :mod:`~shaper.physics.rb_fit`;
- :mod:`~shaper.physics.grid`: the sub-step grid of IF-modulated samples.

Importing the JAX modules turns on float64 (:mod:`~shaper.physics._jax`).
"""
