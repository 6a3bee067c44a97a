"""Pure chart builders: DataFrame in, plotly Figure out (no Django, no I/O). One module per page family.

Plotly renders a subset of HTML inside labels and hover text, so every string that came from an upload
(test names, messages, defect titles, component names) goes through :func:`safe_text` before it enters a
figure. Colours come from :data:`PALETTE` (Okabe–Ito, colour-blind safe); never let colour be the only signal
(use text, markers or dash styles too).
"""

from __future__ import annotations

import html

# Okabe & Ito (2008), "Color Universal Design": distinguishable under the common colour-vision deficiencies.
PALETTE = ["#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#F0E442", "#000000"]


def safe_text(value: object) -> str:
    """Escape a string for use inside a plotly label or hover text."""
    return html.escape("" if value is None else str(value), quote=True)
