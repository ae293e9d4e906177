"""Where a package came from, per PEP 610 direct_url.json, with every credential stripped."""

from __future__ import annotations

import os
import re
import urllib.parse
from pathlib import Path
from typing import Any

from holotype.records import Origin

# Query parameters that carry secrets in signed or tokenised download URLs.
_SECRET_QUERY = re.compile(r"(token|secret|password|passwd|pwd|key|sig|signature|auth|credential|session)",
                           re.IGNORECASE)
# PEP 610: "${USER}:${PASS}" style environment-variable references are kept; they hold no secret.
_ENV_REFERENCE = re.compile(r"^\$\{[A-Za-z0-9-_]+\}(:\$\{[A-Za-z0-9-_]+\})?$")
_SAFE_USERS = ("git",)


def strip_credentials(url: str) -> str:
    """`url` without user:password (PEP 610's rule) and without secret-looking query values."""
    try:
        parts = urllib.parse.urlsplit(url)
    except ValueError:
        return "<unparseable url>"
    netloc = parts.netloc
    if "@" in netloc:
        userinfo, host = netloc.rsplit("@", 1)
        if userinfo not in _SAFE_USERS and not _ENV_REFERENCE.match(userinfo):
            netloc = host
    return urllib.parse.urlunsplit((parts.scheme, netloc, parts.path, _redact_pairs(parts.query),
                                    _redact_fragment(parts.fragment)))


def _redact_pairs(text: str) -> str:
    """key=value pairs with the values of secret-looking keys replaced."""
    if not text or "=" not in text:
        return text
    pairs = urllib.parse.parse_qsl(text, keep_blank_values=True)
    kept = [(k, "REDACTED" if _SECRET_QUERY.search(k) else v) for k, v in pairs]
    return urllib.parse.urlencode(kept, safe="${}/")


def _redact_fragment(fragment: str) -> str:
    """A fragment may carry `sha256=…` and `subdirectory=…` (kept) or `access_token=…` (redacted)."""
    if not fragment or "=" not in fragment:
        return fragment
    return "&".join(_redact_pairs(part) for part in fragment.split("&"))


def hide_home(url: str) -> str:
    """A URL or path under the recording user's home folder, written with ~ so the lock names no user."""
    import os

    home = os.path.expanduser("~").rstrip("/")
    if not home or home == "/":
        return url
    for prefix, short in (("file://" + home + "/", "file://~/"), (home + "/", "~/")):
        if url.startswith(prefix):
            return short + url[len(prefix):]
    return url.replace(home + "/", "~/")


NEAR = 2  # a local path at most this many folders above the project is recorded relative to it


def portable_url(url: str, root: Path | None) -> str:
    """A local `file://` URL as the lock keeps it: relative to the project (`./tools/helper`, `../shared/x`)
    when it lies inside or near it, else with the home folder as `~`; other URLs unchanged."""
    if root is not None and url.startswith("file://"):
        path = urllib.parse.unquote(urllib.parse.urlsplit(url).path)
        try:
            rel = os.path.relpath(path, os.path.realpath(root)) if os.path.isabs(path) else None
        except ValueError:  # another drive
            rel = None
        if rel is not None:
            parts = rel.split(os.sep)
            ups = len([p for p in parts if p == ".."])
            if ups == 0:
                return "./" + "/".join(parts) if rel != "." else "."
            if ups <= NEAR and all(p == ".." for p in parts[:ups]):
                return "/".join(parts)
    return hide_home(url)


def origin_from_direct_url(doc: dict[str, Any] | None, root: Path | None = None) -> Origin:
    """Build an Origin from a parsed direct_url.json; `None` means installed from an index.

    Local paths are made portable (`portable_url`) when the project folder `root` is given."""
    if doc is None:
        return Origin("index")
    if not isinstance(doc, dict) or not isinstance(doc.get("url"), str):
        return Origin("unknown")
    from packaging.direct_url import DirectUrl, DirectUrlValidationError

    try:
        parsed = DirectUrl.from_dict(doc)
    except (DirectUrlValidationError, TypeError, ValueError):
        # not a valid record: still never write a credential or the recording user's home folder
        return Origin("unknown", url=hide_home(strip_credentials(doc["url"])))
    url = portable_url(strip_credentials(parsed.url), root)
    if parsed.vcs_info is not None:
        return Origin(
            "vcs",
            url=url,
            vcs=parsed.vcs_info.vcs,
            commit=parsed.vcs_info.commit_id,
            requested_revision=parsed.vcs_info.requested_revision,
            subdirectory=parsed.subdirectory,
        )
    if parsed.dir_info is not None:
        kind = "editable" if parsed.dir_info.editable else "directory"
        return Origin(kind, url=url, subdirectory=parsed.subdirectory)
    info = parsed.archive_info
    digest = None
    if info is not None:
        if info.hashes:
            algo = "sha256" if "sha256" in info.hashes else sorted(info.hashes)[0]
            digest = f"{algo}={info.hashes[algo]}"
        elif getattr(info, "hash", None):  # the legacy single-hash field
            digest = str(info.hash)  # type: ignore[attr-defined]
    return Origin("archive", url=url, archive_hash=digest, subdirectory=parsed.subdirectory)
