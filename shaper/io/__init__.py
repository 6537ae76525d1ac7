"""Stage 5, files: atomic writes and the folder lock, our waveform files (CSV + JSON
sidecar), other waveform files (plain CSV, npy, npz).
"""
