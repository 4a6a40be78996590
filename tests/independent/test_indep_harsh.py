"""Harsh images: the seeded random scenes with every camera effect turned up (low visibility, strong stray light,
blur, few electrons, mottled light). The issue sets no accuracy target for such severity, so only honesty is
asserted: the engine either refuses with a message, or its radius lies within 3 reported standard uncertainties
of the truth. A confident wrong answer is the one outcome an inspector cannot detect; refusing nearly everything
is the other way to fail, so the number of refusals is capped.
"""

from __future__ import annotations

import pytest

import rings_model as M
from engine_runs import measure, summary

SEEDS = list(range(40))
#: Refusing is honest, but an engine that refuses everything would pass every per-image test above: at most this
#: many of the 40 may be refused (measured: 10 refused, the other 30 measured). Invented scenes, so the cap is
#: the project's own choice (common practice, no source): about a quarter of images this harsh, plus 2.
MAX_REFUSED = 12

#: seeds where the engine gives a confident wrong radius; reported to its owner with the figures, marked until fixed
KNOWN_FAILURES: dict[int, str] = {}
_outs: dict[int, object] = {}


def _run(seed):
    if seed not in _outs:
        _outs[seed] = measure(f"harsh #{seed}", M.harsh_scene(seed), seed)
    return _outs[seed]


@pytest.mark.slow
@pytest.mark.parametrize(
    "seed",
    [pytest.param(s, marks=pytest.mark.xfail(strict=True, reason=KNOWN_FAILURES[s])) if s in KNOWN_FAILURES else s
     for s in SEEDS],
)
def test_harsh_image_is_refused_or_honest(seed):
    o = _run(seed)
    print(o.line())
    if o.ok:
        assert abs(o.z) <= 3.0, f"confident wrong answer: {o.line()}"


@pytest.mark.slow
def test_harsh_figures():
    outs = [_run(s) for s in SEEDS]
    print("\n" + "\n".join(o.line() for o in outs) + "\n" + summary(outs))
    # every refusal says why, in one line
    for o in outs:
        if not o.ok:
            assert o.error and "\n" not in o.error
    refused = sum(not o.ok for o in outs)
    assert refused <= MAX_REFUSED, f"{refused} of {len(outs)} harsh images refused (at most {MAX_REFUSED}): " + summary(outs)
