"""tracevet: review and sign-off of wavelet-denoised ECG/MCG recordings.

Layers, with one direction of flow (each imports only from those above it):

``recording``  -> ``cleaning`` -> ``assessment`` -> ``workqueue`` -> ``app`` / ``cli``

The caution shown with every report is :data:`tracevet.caution.CAUTION`.
"""

__version__ = "0.1.0"
