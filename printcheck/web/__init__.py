"""The shop web application: ``printcheck serve`` (and ``printcheck watch``).

A phone opens the upload page over the shop network, sends a photo of a print, and sees
its count, verdict and where to scrape next a few seconds later.  Measuring runs in worker
processes (as ``batch`` does), off the request path; each pass is recorded in the history
exactly as ``batch`` records a photo.

Modules: :mod:`.measurer` (the worker pool and the job table), :mod:`.uploads` (checking
and storing uploads by content hash), :mod:`.security` (access code, CSRF), :mod:`.app`
(the Starlette application and its pages), :mod:`.server` (running it under uvicorn) and
:mod:`.watch` (measuring photos dropped into a folder).
"""

from __future__ import annotations

__all__: list[str] = []
