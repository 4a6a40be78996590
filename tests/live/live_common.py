"""Constants and helpers shared by the live-view tests (generated sequences' camera, lamp and radius)."""

from ringgauge import synth

CAMERA = synth.Camera(width=320, height=256, pixel_um=16.0)
SOURCE = "mercury-e"
PIXEL_UM = 16.0
RADIUS_MM = 800.0

#: settling only: the air film thins to rest, then the part stands still
SETTLE = dict(settle_frames=30, rest_frames=16, press_frames=0, after_frames=0)
#: pressing only: the part lies at rest from the first frame, is pressed, released, and rests again
PRESS = dict(settle_frames=2, rest_frames=14, press_frames=14, after_frames=14, start_gap_nm=300.0)


def setup_for_tests():
    from ringgauge.bench_setup import default_setup

    # the pixel scale is exact in a generated file: no calibration term, so the budget is the tracker's own
    return default_setup(PIXEL_UM, SOURCE)
