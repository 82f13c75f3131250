"""Fidelity assessment: beat detection, beat templates, shape measures and distortion flags."""
