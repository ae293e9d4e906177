"""Secrets never reach a report: values of secret-looking environment variables and well-known token
shapes are replaced in every message holotype writes or prints (the raw analysis logs keep what the
analyses printed; they are not committed).

Variable names treated as secret (matched case-insensitively anywhere in the name): TOKEN, SECRET,
PASSWORD, PASSWD, PASSPHRASE, CREDENTIAL, PRIVATE, APIKEY, API_KEY, ACCESS_KEY, and names ending in
_KEY or _PAT; plus AWS_*, AZURE_CLIENT_*, GOOGLE_APPLICATION_CREDENTIALS, DATABASE_URL (common
cloud and service credentials). Values shorter than six characters are left alone (too common to
be secret, and replacing them would garble ordinary text).

Token shapes: `Bearer …` and `Basic …` authorisation values, GitHub (`ghp_`, `gho_`, `ghu_`,
`ghs_`, `ghr_`, `github_pat_`), GitLab (`glpat-`), Slack (`xox?-`), AWS access key ids (`AKIA…`,
`ASIA…`), private-key blocks, and `user:password@` in URLs.
"""

from __future__ import annotations

import os
import re

_SECRET_NAME = re.compile(r"TOKEN|SECRET|PASSWORD|PASSWD|PASSPHRASE|CREDENTIAL|PRIVATE|APIKEY|API_KEY|ACCESS_KEY"
                          r"|_KEY$|_PAT$|^AWS_|^AZURE_CLIENT_|^GOOGLE_APPLICATION_CREDENTIALS$|^DATABASE_URL$",
                          re.IGNORECASE)
_NOT_SECRET = frozenset({"HOLOTYPE_SEED", "HOLOTYPE_PROJECT_SEED", "PYTHONHASHSEED", "SSH_AUTH_SOCK", "GPG_KEY"})
MIN_SECRET_CHARS = 6
_TOKEN_SHAPES = re.compile(
    r"(?P<auth>\b(?:Bearer|Basic|Token)\s+)[A-Za-z0-9._~+/=-]{8,}"
    r"|\b(?:gh[pousr]_[A-Za-z0-9]{20,}|github_pat_[A-Za-z0-9_]{20,}|glpat-[A-Za-z0-9_-]{20,}"
    r"|xox[abprs]-[A-Za-z0-9-]{10,}|(?:AKIA|ASIA)[0-9A-Z]{16})\b"
    r"|-----BEGIN [A-Z ]*PRIVATE KEY-----[\s\S]*?(?:-----END [A-Z ]*PRIVATE KEY-----|$)"
    r"|(?P<scheme>[a-z][a-z0-9+.-]*://)[^/\s:@]+:[^/\s@]+@",
    re.IGNORECASE,
)


def secret_values(environ: dict[str, str] | None = None) -> dict[str, str]:
    """value -> variable name, for the environment variables whose names look secret."""
    env = os.environ if environ is None else environ
    return {value: name for name, value in env.items()
            if name not in _NOT_SECRET and _SECRET_NAME.search(name) and len(value) >= MIN_SECRET_CHARS}


def _shape(match: re.Match[str]) -> str:
    if match.group("auth"):
        return match.group("auth") + "[redacted]"
    if match.group("scheme"):
        return match.group("scheme") + "[redacted]@"
    return "[redacted]"


def redact(text: str, secrets: dict[str, str] | None = None) -> str:
    """`text` with secret variable values and token shapes replaced."""
    if not text:
        return text
    for value, name in sorted((secrets if secrets is not None else secret_values()).items(),
                              key=lambda item: -len(item[0])):
        if value in text:
            text = text.replace(value, f"[redacted ${name}]")
    return _TOKEN_SHAPES.sub(_shape, text)
