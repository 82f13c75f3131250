"""tracevet: review and sign-off of wavelet-denoised ECG/MCG recordings.

Layers, with one direction of flow (each imports only from those above it):

``recording``  -> ``cleaning`` -> ``assessment`` -> ``workqueue`` -> ``app`` / ``cli``

tracevet is not a medical device and does not diagnose. Its flags support,
and never replace, review by qualified staff.
"""

__version__ = "0.1.0"
