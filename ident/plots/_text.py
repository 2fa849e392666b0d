r"""User text in figures: shown literally, never parsed as formula markup.

Matplotlib reads text between two ``$`` signs as a formula (mathtext): a column
named ``cost $ per kWh`` or a unit ``$/h`` would be typeset as maths, and an
unbalanced formula (``$\frac{``) makes drawing fail. Every name, unit, file
name and message that comes from the user's files passes through
:func:`literal` before it reaches a figure; text rigfit writes itself needs no
such care (it holds no ``$``).
"""

from __future__ import annotations

__all__ = ["literal"]


def literal(text: object) -> str:
    r"""Return ``text`` with every ``$`` escaped (``\$``), so matplotlib shows it as written.

    Examples
    --------
    >>> literal("cost [$/h]")
    'cost [\\$/h]'
    """
    return str(text).replace("$", r"\$")
