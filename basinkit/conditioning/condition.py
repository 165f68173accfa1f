"""``condition``: burn, then fill or breach, and summarise what changed."""

from __future__ import annotations

from ..errors import InputError
from ..terrain.model import Terrain
from .fill import fill_depressions, summarize_change


def condition(terrain: Terrain, method: str = "fill", epsilon: float = 0.0,
              burn=None, burn_depth: float = 0.0, max_breach_depth: float | None = None,
              max_breach_length: float | None = None):
    """Condition a DEM so that every cell drains to an exit.

    Parameters
    ----------
    terrain : Terrain
    method : {"fill", "breach", "none"}
        ``fill``: Priority-Flood (Barnes et al. 2014). ``breach``: least-cost breaching
        (Lindsay 2016) limited by ``max_breach_depth`` (m) and ``max_breach_length`` (m);
        what cannot be breached within the limits is filled. ``none``: leave as is.
    epsilon : float
        See :func:`fill_depressions`.
    burn : path or geometries, optional
        Lines of known channels or culverts; their cells are lowered by ``burn_depth`` before
        conditioning, so an embankment does not dam the flow.
    burn_depth : float
        Metres to lower burned cells.

    Returns
    -------
    (Terrain, ConditionSummary)
    """
    if method not in ("fill", "breach", "none"):
        raise InputError(f"unknown conditioning method {method!r}; use fill, breach or none")
    work = terrain
    burned = 0
    if burn is not None:
        from .burn import burn_lines

        work, burned = burn_lines(terrain, burn, burn_depth)
    if method == "fill":
        out = fill_depressions(work, epsilon=epsilon)
    elif method == "breach":
        from .breach import breach_depressions

        out = breach_depressions(work, max_depth=max_breach_depth,
                                 max_length=max_breach_length)
        out = fill_depressions(out, epsilon=epsilon)
    else:
        out = work
    return out, summarize_change(terrain, out, method, burned)
