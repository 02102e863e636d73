"""The project board (``dagmill overview --html FILE``) as one self-contained HTML page.

Rendered by jinja2 from ``templates/overview.html.j2`` in the report's template
environment (autoescaping on, undefined names an error) with the report's CSS; the page
loads nothing and links nowhere. Same board, same bytes (no time of writing in it).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from runner import __version__
from runner.present.report import environment
from runner.present.svg import INK, MUTED, PAPER
from runner.present.text import STATE_TEXT


def render_overview(board: Mapping[str, Any]) -> str:
    """The HTML page of a board.

    Parameters
    ----------
    board : mapping
        :meth:`runner.project.Board.as_dict`.

    Returns
    -------
    str
        The page; the same board gives the same text.
    """
    page = environment().get_template("overview.html.j2")
    return page.render(title=f"dagmill overview: {board['specs']}", board=board,
                       states=STATE_TEXT, version=__version__,
                       palette={"paper": PAPER, "ink": INK, "muted": MUTED})
