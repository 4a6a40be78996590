"""``ringgauge watch``: the live analysis without a window — one line per analysed frame from a camera, stream,
video file or folder of numbered frames."""

from __future__ import annotations

import argparse
import json
import os
import sys

from ..errors import InputError
from ._options import integer, number
from .analyze import add_setup_arguments, setup_from_args


def register(sub) -> None:
    p = sub.add_parser(
        "watch",
        help="follow the fringes live from a camera or video: radius (or power and astigmatism against a test "
        "plate), settle indicator, sign from the motion",
        description=(
            "Follow a lens on an optical flat frame by frame, as the camera delivers it: the radius of curvature "
            "with its uncertainty, whether the part has settled (fringes still within a stated fraction of a "
            "fringe over the last frames), and the sign read from the rings' motion while the gap closes (rings "
            "moving out: centre contact, +; in: edge contact, −). Frames the analysis cannot keep up with are "
            "dropped, never queued. With a form option (--mode form, --test-diameter, --tolerance, --test-plate) "
            "the part is followed on a test plate instead: power and astigmatism (fringes and nm, with their "
            "uncertainty), settled, and the sign from the fringes' motion while the gap closes. A video file or folder ends the run at its last frame; a camera runs until "
            "Ctrl+C. Safety: the lamp and laser cautions of 'ringgauge sources' apply at the bench."
        ),
        epilog=(
            "Examples: ringgauge watch --camera 0 --source sodium-d --pixel-size 8 --pixel-size-u 0.01\n"
            "          ringgauge watch --camera part.avi --source mercury-e --pixel-size 16 --json\n"
            "          ringgauge watch --camera plate.avi --source mercury-e --pixel-size 80 --mode form "
            "--test-diameter 16 --json"
        ),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--camera", required=True, metavar="SOURCE",
                   help="camera index (0, 1, …), stream address (rtsp://…, http://…), video file or a folder of "
                   "numbered frames")
    add_setup_arguments(p)
    g = p.add_argument_group("live analysis")
    g.add_argument("--settle-frames", type=integer("--settle-frames", lo=2), default=None, metavar="N",
                   help="frames the fringes must stand still for the part to count as settled (default 10)")
    g.add_argument("--settle-fringes", type=number("--settle-fringes"), default=None, metavar="F",
                   help="largest fringe motion over those frames, fractions of a fringe (default 0.05)")
    g.add_argument("--realtime", action="store_true",
                   help="play a video file or folder at its frame rate, dropping frames as a camera would "
                   "(default for files: analyse every frame)")
    g.add_argument("--max-frames", type=int, default=None, metavar="N", help="stop after N analysed frames")
    g.add_argument("--open-timeout", type=number("--open-timeout"), default=None, metavar="S",
                   help="longest wait for the source to open, s (default 8)")
    o = p.add_argument_group("output")
    o.add_argument("--json", action="store_true", help="one JSON object per analysed frame, one per line")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from ..live.motion import SETTLE_FRAMES, SETTLE_FRINGES
    from ..live.form_tracker import FormLiveSession, open_session
    from ..live.session import LiveOptions
    from ..live.source import OPEN_TIMEOUT_S, open_source

    setup, warnings = setup_from_args(args)
    settle_frames = args.settle_frames or SETTLE_FRAMES
    settle_fringes = SETTLE_FRINGES if args.settle_fringes is None else args.settle_fringes
    if not 0 < settle_fringes < 0.5:
        raise InputError("--settle-fringes must lie between 0 and 0.5 fringe")
    if args.max_frames is not None and args.max_frames < 1:
        raise InputError("--max-frames must be at least 1")
    timeout = OPEN_TIMEOUT_S if args.open_timeout is None else args.open_timeout
    if not 0 < timeout <= 120:
        raise InputError("--open-timeout must lie between 0 and 120 s")
    for w in warnings:
        print(f"warning: {w}", file=sys.stderr)
    try:
        source = open_source(args.camera, pace=args.realtime, timeout_s=timeout)
    except InputError as exc:
        from ..live import source as live_source

        if live_source.STUCK_OPEN:  # a native thread still blocked in the backend: leave without waiting for it
            print(f"ringgauge: {exc}", file=sys.stderr, flush=True)
            sys.stdout.flush()
            os._exit(exc.exit_code)
        raise
    opts = LiveOptions(settle_frames=settle_frames, settle_fringes=settle_fringes)
    try:
        session = open_session(source, setup, opts)
        if not args.json and isinstance(session, FormLiveSession):
            print(f"watching {args.camera} ({source.kind}) against a test plate; the first frame gets the full form "
                  f"evaluation (a few seconds), later frames a warm-started fit; settled = gap still within "
                  f"{settle_fringes:g} fringe over {settle_frames} frames; Ctrl+C stops", file=sys.stderr)
        elif not args.json:
            print(f"watching {args.camera} ({source.kind}); settled = fringes within {settle_fringes:g} fringe over "
                  f"{settle_frames} frames; Ctrl+C stops", file=sys.stderr)
        n = 0
        for st in session:
            if args.json:
                print(json.dumps(st.to_json(), ensure_ascii=False), flush=True)
            else:
                print(_line(st), flush=True)
            n += 1
            if args.max_frames and n >= args.max_frames:
                break
    finally:
        source.close()
    if not args.json:
        print(f"{n} frames analysed, {source.dropped} dropped; sign: {session.sign.sign} — {session.sign.detail}",
              file=sys.stderr)
    return 0


def _line(st) -> str:
    if not st.ok:
        what = "no test-plate fringes followed" if hasattr(st, "power_fringes") else "no rings tracked"
        return f"frame {st.frame:6d}  {what}: {st.message}"
    if getattr(st, "power_fringes", None) is not None:
        settled = "SETTLED" if st.settled else "moving "
        motion = "" if st.motion_fringes is None else f"{st.motion_fringes:5.2f} fr"
        sg = "+" if st.power_sign != "unknown" else ""  # a magnitude until the motion gave the sign
        pw = f"{st.power_fringes:{sg}.3f}" + ("" if sg else " (sign unknown)")
        return (f"frame {st.frame:6d}  power {pw} ± {2 * st.power_u_fringes:.3f} fringe ({st.power_nm:{sg}.0f} ± "
                f"{2 * st.power_u_nm:.0f} nm)  astigmatism {st.astigmatism_fringes:.3f} ± "
                f"{2 * st.astigmatism_u_fringes:.3f} fringe ({st.astigmatism_nm:.0f} ± {2 * st.astigmatism_u_nm:.0f}"
                f" nm)  k = 2  {settled} {motion:>8}  fringes {st.rings:<5}  sign {st.power_sign}")
    settled = "SETTLED" if st.settled else "moving "
    motion = "" if st.motion_fringes is None else f"{st.motion_fringes:5.2f} fr"
    return (f"frame {st.frame:6d}  R = {st.radius_mm:.4f} mm ± {st.radius_U_mm:.2g} mm (k = {st.k:.2g})  {settled} "
            f"{motion:>8}  rings {st.rings:<5}  gap {st.gap:<8}  sign {st.power_sign}")
