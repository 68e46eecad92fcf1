"""The coach's workbench: a local web app over a folder of clips (see docs/workbench.md).

:func:`create_app` builds the Starlette app; the CLI's ``balltraj workbench`` serves it with uvicorn.
"""

from __future__ import annotations


def create_app(folder, **kwargs):
    """The workbench app for ``folder`` (see :func:`balltraj.workbench.app.create_app`)."""
    from .app import create_app as make

    return make(folder, **kwargs)


__all__ = ["create_app"]
