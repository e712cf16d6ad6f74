"""The Content-Security-Policy every page carries: nothing is loaded from anywhere but the site itself.

The policy is put into each page as a ``<meta http-equiv>`` element by :func:`with_policy`, after the page's
template has rendered, so a user theme cannot leave it out; it goes before anything else the page holds,
so it governs every load. A second, looser policy written by a theme would not help it: a browser enforces
every policy a page carries. Markdown pictures are rendered as links (``pages.render_markdown``), so they are
not loads at all.

- scripts only from the site's own files (``'self'``; the single-file report lists its inline scripts by hash);
  Vega evaluates chart expressions with its interpreter (``site.js`` passes ``ast: true``), so no
  ``'unsafe-eval'`` is needed;
- styles from the site's files and inline (Vega sets style attributes on what it draws; a style cannot load
  anything the other directives forbid);
- pictures only from the site and ``data:``/``blob:`` (what charts draw); no fonts, frames, objects, forms,
  fetches or base URL from anywhere else.
"""

from __future__ import annotations

import base64
import hashlib
import re

_COMMON = (
    "default-src 'none'",
    "style-src 'self' 'unsafe-inline'",
    "img-src 'self' data: blob:",
    "font-src 'self'",
    "connect-src 'none'",
    "media-src 'none'",
    "object-src 'none'",
    "frame-src 'none'",
    "worker-src 'none'",
    "manifest-src 'none'",
    "form-action 'none'",
    "base-uri 'none'",
)
SITE_POLICY = "; ".join(("script-src 'self'", *_COMMON))

#: Where the policy goes: after the doctype, ``<html>``, ``<head>`` and charset when the page starts with them.
_HEAD = re.compile(
    r"\A\s*(?:<!doctype[^>]*>\s*)?(?:<html\b[^>]*>\s*)?(?:<head\b[^>]*>\s*)?(?:<meta\s+charset\b[^>]*>\s*)?",
    re.IGNORECASE,
)


def meta(policy: str) -> str:
    """The ``<meta>`` element that carries ``policy``."""
    return f'<meta http-equiv="Content-Security-Policy" content="{policy}">\n'


#: Any ``<meta>`` element (quoted attribute values may hold ``>``).
_META = re.compile(r"""<meta\b(?:[^>"']|"[^"]*"|'[^']*')*>""", re.IGNORECASE)
_HTTP_EQUIV = re.compile(r"[\s/]http-equiv\s*=", re.IGNORECASE)


def _pragma_free(html: str) -> str:
    """``html`` without ``<meta http-equiv>`` elements: a refresh would send the reader's browser elsewhere
    (a load the policy cannot forbid), and only sitegen's own policy belongs there. The default theme has none."""
    return _META.sub(lambda m: "" if _HTTP_EQUIV.search(m.group(0)) else m.group(0), html)


def with_policy(html: str, policy: str = SITE_POLICY) -> str:
    """``html`` with the policy as the first element of its head (and no other ``http-equiv`` pragma)."""
    html = _pragma_free(html)
    m = _HEAD.match(html)
    at = m.end() if m else 0
    return html[:at] + meta(policy) + html[at:]


def script_hash(text: str) -> str:
    """The CSP source expression that allows one inline script whose content is ``text``."""
    digest = hashlib.sha256(text.encode("utf-8")).digest()
    return "'sha256-" + base64.b64encode(digest).decode("ascii") + "'"


def single_file_policy(scripts: list[str]) -> str:
    """The policy of the single-file report: its own inline scripts (by hash) and nothing from elsewhere."""
    return "; ".join(("script-src " + " ".join(script_hash(s) for s in scripts), *_COMMON))
