"""The address of a Dask cluster, as a recipe or ``--cluster`` gives it: ``local:N`` or ``tcp://host:port``."""

from __future__ import annotations

import re
from typing import Any

from .errors import StageSpecError
from .parsing import shown

MAX_ADDRESS = 255
MAX_LOCAL_WORKERS = 64
_REMOTE = re.compile(r"(tcp|tls)://[A-Za-z0-9.\-\[\]:]+:[0-9]{1,5}")
_LOCAL = re.compile(r"local:([0-9]{1,3})")


def local_workers(address: str) -> int | None:
    """Return N of a ``local:N`` address, None for a scheduler's address."""
    found = _LOCAL.fullmatch(address)
    return int(found.group(1)) if found else None


def check_address(address: Any) -> str:
    """Return ``address`` when it is ``local:N`` (1 to MAX_LOCAL_WORKERS workers) or ``tcp://host:port``
    (or ``tls://``); raise StageSpecError naming the value otherwise."""
    if not isinstance(address, str) or len(address) > MAX_ADDRESS:
        raise StageSpecError(f"address must be 'local:N' or 'tcp://host:port', not {shown(address)}", key="address")
    local = _LOCAL.fullmatch(address)
    if local and 1 <= int(local.group(1)) <= MAX_LOCAL_WORKERS:
        return address
    if local:
        raise StageSpecError(f"address {address!r}: a local cluster has 1 to {MAX_LOCAL_WORKERS} workers",
                             key="address")
    if not _REMOTE.fullmatch(address):
        raise StageSpecError(f"address must be 'local:N' or 'tcp://host:port', not {address!r}", key="address")
    return address
