"""The figure helpers every plot shares (matplotlib on the Agg backend, no display).

Imported only by the plot modules, which are imported only for ``--plot``: matplotlib
is never paid for at start-up.
"""

from __future__ import annotations

import io


def agg_figure(**kwargs):
    """A matplotlib ``Figure`` on the Agg backend (no display needed); keyword arguments
    as for :class:`matplotlib.figure.Figure` (``figsize`` in inches, ``dpi``)."""
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    return Figure(**kwargs)


def png_bytes(fig) -> bytes:
    """The PNG bytes of ``fig``, laid out tight."""
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()
