"""Throwaway PostgreSQL clusters for the records tests: where the server binaries are and how to run them."""

from __future__ import annotations

import glob
import os
import shutil


def _pg_bin() -> str | None:
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"))
    if found:
        return os.path.dirname(found[-1])
    w = shutil.which("initdb")
    return os.path.dirname(w) if w else None


def _as_server_user(cmd: list[str]) -> list[str]:
    if os.geteuid() != 0:
        return cmd
    if shutil.which("runuser"):
        return ["runuser", "-u", "postgres", "--", *cmd]
    import shlex

    return ["su", "postgres", "-s", "/bin/sh", "-c", shlex.join(cmd)]
