"""The measuring method's version: which method measured a recorded pass.

:data:`METHOD_VERSION` is recorded with every pass.  Whoever changes what a photo
measures (the locate, segment or measure stages) bumps it; a batch re-run then
re-measures passes recorded by an older method, keeps the new figures as the pass's
figures and keeps the old ones in the history's record of earlier results.
"""

from __future__ import annotations

__all__ = ["METHOD_VERSION"]

#: Bump on any change to the stages that changes a photo's figures.  Passes recorded by
#: printcheck before this was recorded count as method 0.
METHOD_VERSION = 1
