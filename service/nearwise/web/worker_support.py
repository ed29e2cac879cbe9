"""What :mod:`nearwise.web.worker` answers for the errors gunicorn finds, and the worker's
memory guard (``NEARWISE_WORKER_MEMORY_MB``).

The answers are problem+json with a short detail that echoes nothing the client sent except a
checked header name (gunicorn's own messages quote the request line, query string included).
"""

from __future__ import annotations

import ctypes
import ctypes.util
import resource
from typing import Any

from gunicorn.http import errors as herr

from nearwise.web import framing

RETRY_AFTER_S = 10
RETRY = {"Retry-After": str(RETRY_AFTER_S)}
OUT_OF_MEMORY = "The worker is out of memory (NEARWISE_WORKER_MEMORY_MB); try again shortly."

_CLIENT_ERRORS: list[tuple[tuple[type[BaseException], ...], int, str, str]] = [
    (
        (herr.LimitRequestLine,),
        414,
        "uri_too_long",
        "The request line is longer than {line} bytes.",
    ),
    (
        (herr.LimitRequestHeaders,),
        431,
        "header_too_large",
        "The request head is over the limits: at most {fields} fields of at most {field} bytes.",
    ),
    ((herr.ExpectationFailed,), 417, "expectation_failed", "Only Expect: 100-continue is read."),
    (
        (herr.UnsupportedTransferCoding,),
        501,
        "unsupported_transfer_coding",
        "Send the body with Content-Length or Transfer-Encoding: chunked.",
    ),
    (
        (herr.InvalidChunkSize, herr.ChunkMissingTerminator, herr.InvalidChunkExtension),
        400,
        "malformed_request",
        "The chunked body's framing is not valid.",
    ),
    (
        (herr.InvalidRequestLine, herr.InvalidRequestMethod, herr.InvalidHTTPVersion),
        400,
        "malformed_request",
        "The request line is not a valid HTTP/1.1 request line.",
    ),
    (
        (herr.InvalidHeader, herr.InvalidHeaderName, herr.ObsoleteFolding),
        400,
        "malformed_request",
        "A request header is not valid (a bad name or value, or a field given twice).",
    ),
    ((herr.ParseException,), 400, "malformed_request", "The request is not valid HTTP/1.1."),
]


def error_answer(
    exc: BaseException, line: int, fields: int, field: int
) -> tuple[int, str, str, dict[str, str]]:
    """Status, code, detail and extra headers answering ``exc``, raised by gunicorn's parser
    or while answering; ``line``, ``fields`` and ``field`` are the head limits in force."""
    if isinstance(exc, MemoryError):
        detail = "The request needed more memory than a worker may use; try a smaller one."
        return 503, "out_of_memory", detail, RETRY
    if isinstance(exc, (herr.InvalidResponseHeader, herr.InvalidResponseHeaderName)):
        return 500, "internal_error", "The service made an invalid answer header.", {}
    if isinstance(exc, herr.ConfigurationProblem):
        return 500, "internal_error", "The server is not configured right; see its log.", {}
    if isinstance(exc, herr.ForbiddenProxyRequest):
        return 403, "forbidden", "Requests through this proxy are not allowed.", {}
    for kinds, status, code, detail in _CLIENT_ERRORS:
        if isinstance(exc, kinds):
            if isinstance(exc, herr.InvalidHeader) and framing.safe_name(exc.hdr):
                detail = f"The request header {exc.hdr} is not valid or is given twice."
            return status, code, detail.format(line=line, fields=fields, field=field), {}
    return 500, "internal_error", "The server failed unexpectedly; the error is logged.", {}


#: glibc ``mallopt`` parameters (malloc.h) and the values the worker sets.
M_MMAP_THRESHOLD, M_ARENA_MAX = -3, -8
MMAP_THRESHOLD_BYTES = 128 * 1024
ARENA_MAX = 2


def tune_malloc(log: Any) -> bool:
    """Make freed numerical arrays go back to the system (glibc only; True when applied).

    glibc raises its mmap threshold to the size of each large block freed (up to 32 MiB), so
    after one request the next one's arrays come from the heap, where small objects that
    outlive them pin the pages: a worker keeps the peak of every request it has served.
    Each thread may also get its own 64 MiB arena. A fixed threshold of 128 KiB sends every
    array above it to its own mapping, returned on free, and two arenas bound the rest. With
    4 concurrent 200,000-row kNN fits this took a worker's peak from 2.9 to 1.6 GB at the same
    speed (tests/load/attack.py)."""
    name = ctypes.util.find_library("c")
    try:
        libc = ctypes.CDLL(name)
        mallopt = libc.mallopt
    except (OSError, AttributeError, TypeError):
        log.info("malloc is not glibc's: arrays are freed as its allocator decides")
        return False
    mallopt.argtypes, mallopt.restype = [ctypes.c_int, ctypes.c_int], ctypes.c_int
    ok = mallopt(M_MMAP_THRESHOLD, MMAP_THRESHOLD_BYTES) == 1
    return mallopt(M_ARENA_MAX, ARENA_MAX) == 1 and ok


def limit_address_space(headroom_mb: int, log: Any) -> int | None:
    """Limit this process's address space to its present size plus ``headroom_mb`` MiB (0: no
    limit); returns the limit in bytes. An allocation past it raises MemoryError."""
    if headroom_mb <= 0:
        return None
    size = vm_size()
    if size is None:
        log.warning("NEARWISE_WORKER_MEMORY_MB is not applied: no /proc/self/status here")
        return None
    limit = size + headroom_mb * 2**20
    _, hard = resource.getrlimit(resource.RLIMIT_AS)
    if hard != resource.RLIM_INFINITY:
        limit = min(limit, hard)
    resource.setrlimit(resource.RLIMIT_AS, (limit, hard))
    log.info(
        "worker address space limited to %d MiB (%d MiB loaded + NEARWISE_WORKER_MEMORY_MB=%d)",
        limit >> 20,
        size >> 20,
        headroom_mb,
    )
    return limit


def vm_size() -> int | None:
    """This process's virtual size in bytes (VmSize), or None where /proc is not there."""
    try:
        with open("/proc/self/status", encoding="ascii") as f:
            for line in f:
                if line.startswith("VmSize:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        return None
    return None
