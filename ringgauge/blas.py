"""Numerical work on one BLAS thread.

ringgauge's dense solves are small (tens of parameters): a second BLAS thread brings nothing and, on a shared
2-core bench PC (batch workers, the window, the live view), threads fighting for cores slow them many times over.
The thread-pool controller is made once per process: finding the loaded libraries costs milliseconds a call.
"""

from __future__ import annotations

from functools import lru_cache


@lru_cache(maxsize=1)
def _controller():
    from threadpoolctl import ThreadpoolController

    return ThreadpoolController()


def one_thread(user_api: str | None = "blas"):
    """A context holding the BLAS libraries (``user_api=None``: every thread pool, OpenMP too) to one thread."""
    return _controller().limit(limits=1, user_api=user_api)
