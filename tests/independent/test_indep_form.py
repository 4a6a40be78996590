"""Surface form on single frames and frame sets rendered by this folder's own test-plate model (plate_model.py).

Targets of the form issue for images made independently of ringgauge's generator: power, astigmatism and
irregularity within 0.05 fringe of the truth (aim 0.02, printed), and on every frame set the sign of the power
right. The truth is computed from the rendered height by the ISO 10110-5:2015 meanings of the terms
(plate_model.truth_terms). One frame cannot give the sign (intensity is even in the gap), so single frames are
compared by magnitude. Frame sets: the gap grows between frames by unequal steps, with small tilt changes.

Run with ``-s`` to see the figures per case.
"""

from __future__ import annotations

import pytest

import plate_model as P
from ringgauge.bench_setup import BenchSetup
from ringgauge.form.evaluate import evaluate_form
from ringgauge.imaging import frame_from_array
from ringgauge.sources import get_source

TOL = 0.05  # fringes, the target
AIM = 0.02
TERMS = ("power_fringes", "astigmatism_fringes", "irregularity_fringes")

B = P.Part()
UNEVEN = dict(ramp=(0.6, 0.3), falloff_sigma=0.8, falloff_centre=(0.5, 0.3))
TILTS4 = [(0.0, 0.0), (0.06, 0.0), (0.02, -0.05), (0.07, 0.03)]

SINGLE = {
    "centre contact 2 fr, bright rim": B.with_(power=2.0, rim_phase=0.5),
    "edge contact -3 fr, dark rim": B.with_(power=-3.0, rim_phase=0.0),
    "0.8 fr, uneven light": B.with_(power=0.8, **UNEVEN),
    "astigmatism 1 fr at 30 deg": B.with_(power=2.0, astig=1.0, astig_axis_deg=30.0, rim_phase=0.3),
    "zonal 0.2 fr on 3 fr": B.with_(power=3.0, zonal=0.2),
    "saddle: 4 fr astigmatism, no power": B.with_(power=0.0, astig=4.0, astig_axis_deg=20.0),
    "10 fr, dark rim": B.with_(power=10.0, rim_phase=0.0),
}

SETS = {
    "centre contact, astigmatism, 4 frames": (B.with_(power=2.0, astig=0.5, astig_axis_deg=60.0),
                                              (0.0, 0.21, 0.50, 0.68), TILTS4),
    "edge contact, dark rim, 4 frames": (B.with_(power=-2.5, rim_phase=0.0), (0.0, 0.17, 0.41, 0.66), TILTS4),
    "zonal error, 3 frames": (B.with_(power=1.5, zonal=0.15), (0.0, 0.23, 0.47), TILTS4[:3]),
    "edge contact, astigmatism > power, 5 frames": (
        B.with_(power=-1.0, astig=1.5, astig_axis_deg=110.0),
        (0.0, 0.19, 0.37, 0.61, 0.83), TILTS4 + [(0.03, 0.08)]),
    "low power under uneven light, 4 frames": (B.with_(power=0.6, rim_phase=0.0, **UNEVEN),
                                               (0.0, 0.22, 0.45, 0.71), TILTS4),
    "centre contact pair (2 frames)": (B.with_(power=1.2, rim_phase=0.5), (0.0, 0.24), TILTS4[:2]),
}

#: cases the engine cannot meet yet, with the reason measured; strict: they must start passing to be removed
KNOWN = {
    "0.8 fr, uneven light": "one-frame fit under a strong off-centre fall-off reads 0.063 fringe of irregularity "
    "(truth 0, u 0.060) and power +0.033 (u 0.365, weak-fit warning: powers 0.20-0.83 fit almost equally). "
    "Measured causes (form/fit.py): the fringe shape is chosen two-beam (F = 0) on a cost difference of 0.05 %; "
    "with the true light envelope and the true shape the fit reads irregularity 0.010, but neither is known "
    "from one frame: an envelope taken from the plate around the part was tried and read power 0.68",
    "low power under uneven light, 4 frames": "the phase steps of four frames with 0.6 fringe of power do not "
    "settle (steps 0.18/0.35/0.75 for 0.22/0.45/0.71: too few fringes), so the frames are fitted with the gap "
    "model, which reads 0.515 for 0.6 (u 0.053, weak-fit warning, 1.6u) -- the one-frame low-power limit above "
    "(form/phase.py, form/fit.py)",
}


def _setup(part):
    return BenchSetup(source=get_source("mercury-e"), pixel_size_um=part.pixel_um,
                      gap_change="increasing")


def _check(name, part, frames, *, signed):
    r = evaluate_form([frame_from_array(f) for f in frames], _setup(part))
    truth = P.truth_terms(part)
    errs = {}
    for t in TERMS:
        v = r.terms[t]
        want = truth[t] if (signed or t != "power_fringes") else abs(truth[t])
        if t == "power_fringes" and not signed:
            v = abs(v)
        errs[t] = v - want
    worst = max(abs(e) for e in errs.values())
    print(f"\n{name}: " + ", ".join(f"{t.split('_')[0]} {r.terms[t]:+.3f} (truth {truth[t]:+.3f}, "
                                     f"u {r.terms_u.get(t, float('nan')):.3f})" for t in TERMS)
          + f"; sign {r.sign.sign:+d}; worst error {worst:.3f} fr" + (" (aim met)" if worst <= AIM else ""))
    return r, truth, errs


def _mark(name):
    return pytest.param(name, marks=pytest.mark.xfail(strict=True, reason=KNOWN[name])) if name in KNOWN else name


@pytest.mark.slow
@pytest.mark.parametrize("name", [_mark(n) for n in SINGLE])
def test_single_frame(name):
    part = SINGLE[name]
    _, _, errs = _check(name, part, P.render(part, 11), signed=False)
    assert all(abs(e) <= TOL for e in errs.values()), errs


@pytest.mark.slow
@pytest.mark.parametrize("name", [_mark(n) for n in SETS])
def test_frame_set(name):
    part, steps, tilts = SETS[name]
    r, truth, errs = _check(name, part, P.render(part, 21, steps=steps, tilt_steps=tilts), signed=True)
    want = 1 if truth["power_fringes"] > 0 else -1
    assert r.sign.sign == want, (r.sign.sign, r.sign.detail)
    assert all(abs(e) <= TOL for e in errs.values()), errs


@pytest.mark.slow
@pytest.mark.parametrize("name", sorted(KNOWN))
def test_weak_low_power_parts_say_so_and_cover_their_error(name):
    # where the 0.05-fringe target is not reached (parts of under about 1.5 fringes under uneven light, the
    # strict xfails above) the result must say the fit is weak and carry an uncertainty that covers the error:
    # |error| <= U (k = 2) for power, astigmatism and irregularity, and a "weak fit" warning
    if name in SINGLE:
        part, frames, signed = SINGLE[name], P.render(SINGLE[name], 11), False
    else:
        part, steps, tilts = SETS[name]
        frames, signed = P.render(part, 21, steps=steps, tilt_steps=tilts), True
    r, _, errs = _check(name, part, frames, signed=signed)
    assert any("weak fit" in w for w in r.warnings), r.warnings
    for t, e in errs.items():
        U = r.term(t).fringes.U
        assert U is not None and abs(e) <= U, (t, e, U)
