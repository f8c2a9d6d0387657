"""``new_subject`` and ``SubjectState`` at their public path (they live in :mod:`rigloop.core.subject`).

Scripts outside rigloop import them from here; this path stays.
"""

from .core.subject import SubjectState, new_subject

__all__ = ["SubjectState", "new_subject"]
