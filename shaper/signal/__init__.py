"""Stage 3, the signal: optimiser parameters -> samples within the limits (pulses), and the
one chain from AWG samples to what the propagator sees (IF modulation, the DAC's hold).
"""
