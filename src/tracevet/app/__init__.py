"""The terminal review app (Textual) and its plot reduction.

``envelope`` and ``plots`` hold the pure drawing code (no Textual import);
``app`` and the ``*_screen`` modules hold the Textual user interface.
"""
