"""Text a person typed, shown on the page as typed and never as markdown (layer 5).

Streamlit renders the text of ``st.markdown``, ``st.caption``, ``st.error``, ``st.warning``,
``st.success``, ``st.info`` and headers as markdown: a recipe name, an operator, a shelf
name, a lot, notes or a refusal quoting what was typed could otherwise carry a link, a
formatting directive or an image whose address the browser would fetch.  :func:`plain`
escapes every character markdown gives a meaning to, so the words show as they were typed.
"""

from __future__ import annotations

import re

__all__ = ["plain", "code_span"]

# The characters that start markdown in a line of text: links and images ([ ] !), autolinks
# and HTML (< >), emphasis (* and _ at a word edge: snake_case keys stay as they are), code
# (`), headings (#), strike-through (~), tables (|), Streamlit's LaTeX ($) and the backslash
# itself.  With [ and ] escaped no link, image or :colour[...] directive can form.
_MARKDOWN = re.compile(r"([\\`*\[\]<>#~$|])|(?<![A-Za-z0-9])_|_(?![A-Za-z0-9])")
# A bare address is made a link by GitHub-flavoured markdown after parsing (an escape does not
# stop it): an invisible word joiner (U+2060) inside "://" and "www." does.
_SCHEME = re.compile(r"(?<=[A-Za-z0-9]):(?=//)")
_WWW = re.compile(r"(?<![A-Za-z0-9])(www)\.", re.IGNORECASE)
_JOINER = "\u2060"


def plain(text: object) -> str:
    """``text`` escaped for Streamlit markdown: shown literally, no link, image or format.

    Examples
    --------
    >>> plain("![x](http://example.org/a.png) **b** ink_black _i_")
    '!\\\\[x\\\\](http:\\u2060//example.org/a.png) \\\\*\\\\*b\\\\*\\\\* ink_black \\\\_i\\\\_'
    """
    escaped = _MARKDOWN.sub(lambda match: "\\" + match.group(0), str(text))
    return _WWW.sub(r"\1" + _JOINER + ".", _SCHEME.sub(":" + _JOINER, escaped))


def code_span(text: object) -> str:
    """``text`` as a markdown code span (shown literally; a backtick inside cannot end it)."""
    return "`" + str(text).replace("`", "'").replace("\n", " ") + "`"
