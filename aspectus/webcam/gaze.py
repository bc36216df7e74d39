"""Head-compensated gaze direction from an eyeball model, and blinks.

Method (per clip, vectorised over frames once landmarking is done)
------------------------------------------------------------------
1. **Metric scale.** The face mesh's iris outline gives the iris diameter in
   pixels per frame, taken onto the level of the limbus fit's circle (the
   clip's median ratio of the two, :func:`limbus_iris_scale`; the mesh reads
   the iris a few per cent too large); with the horizontal visible iris
   diameter of 11.7 mm (Ruefer, Schroeder & Erb 2005 - from memory) the eye's
   distance from the camera is ``f * 11.7 / iris_px``. Dividing by the PnP distance of the (average-size)
   face model gives the person's scale; its median over the clip scales the
   head model, so translation and distance come out in millimetres.
2. **Eyeball centre.** Each eyeball is a sphere of radius 12 mm (Bekerman,
   Gottlieb & Vaiman 2014 - from memory). Its centre is fixed in the head
   frame: the model's centre, moved sideways and vertically by how far this
   person's eye-corner midpoint (median over the clip, so the corners'
   coupling to iris motion averages out) lies from the model's. It moves
   rigidly with the head pose: the rotation from PnP, the translation
   refitted per frame to skin points below the eyes that are followed on the
   picture (:mod:`aspectus.webcam.eye_anchors`; the face mesh's own landmarks move
   with head rotation and with the eyes). Whatever part of the centres'
   vertical motion still follows the iris is measured per clip and removed
   (:func:`decouple_reference`).
3. **Iris centre in 3-D.** The camera ray through the iris centre (the
   face mesh's iris point, refined on the image by a circle fitted
   to the limbus - :func:`aspectus.webcam.limbus.limbus_centres`) meets the sphere of
   radius ``sqrt(12^2 - 5.85^2) = 10.5 mm`` around the eyeball centre, on
   which the iris plane's centre lies. Gaze is the unit vector from eyeball
   centre to that point, in the camera frame: head-compensated by
   construction. Eye-in-head angles are the same vector in the head frame.
4. **Binocular direction**: mean of both eyes' unit vectors, angles per
   :mod:`aspectus.schema`.
5. **Blinks**: the eye aspect ratio (Soukupova & Cech 2016) of both eyes,
   divided by this person's open-eye level (median over the clip's face
   frames); a frame is a blink when it falls below ``blink_rel_threshold``
   (default 0.6) - or where either eye's own aperture over its open level does
   (:func:`blink_frames`) - widened on each side by ``blink_pad_ms`` (40 ms: one frame
   at 30 fps, two at 60) because half-closed lids hide the iris. Blink and no-face samples stay in the table, marked
   invalid.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass

import warnings

import numpy as np

from aspectus.geometry import gaze_vector_to_angles, ray_sphere_near
from aspectus.webcam.headpose import face_model, pose_angles
from aspectus.webcam.landmarks import (LEFT_EAR_POINTS, LEFT_EYE_CORNERS, LEFT_IRIS_CENTRE, LEFT_IRIS_RING, RIGHT_EAR_POINTS,
                        RIGHT_EYE_CORNERS, RIGHT_IRIS_CENTRE, RIGHT_IRIS_RING)

IRIS_DIAMETER_MM = 11.7
EYEBALL_RADIUS_MM = 12.0
IRIS_PLANE_RADIUS_MM = float(np.sqrt(EYEBALL_RADIUS_MM ** 2 - (IRIS_DIAMETER_MM / 2) ** 2))
#: the ways the iris centre is taken (GazeParams.iris_combine)
IRIS_COMBINE = ("auto", "limbus", "rescale", "fuse", "appearance")
#: the limbus fit's median iris diameter (what :func:`switch_iris_px` reads) per px of the renderer's true iris
#: diameter: the median over the 24 cells of the seed-0 gaze grid (``bench/bench_gaze_grid.py --seed 0`` on
#: ff7c782, 2026-12-05, every cell decided on the limbus fit) of ``iris_px_measured / iris_px``; range 0.914 (12 px
#: light iris) to 1.005 (12 px hazel iris), dark irises 0.948-0.989 (docs/notes/gaze-measurement.md, "The switch's
#: threshold on the fit's scale")
LIMBUS_FIT_PER_TRUE_IRIS = 0.969
#: with ``eye_anchor_set="auto"`` a face is small - the eyes placed by skin points below and beside them - below
#: this iris diameter (px; the clip's, as :func:`switch_iris_px` reads it: the limbus fit's median). Until
#: 2026-12-05 it was also where ``iris_combine="auto"`` switched from the appearance estimate to the limbus fit;
#: since then that takes the appearance estimate at every size (re-measured at 25-50 px on area-drawn irises:
#: docs/notes/gaze-measurement.md, "The appearance estimate on large faces"). Set on TRUE iris sizes, applied on
#: the fit's scale: the geometric middle, sqrt(12 x 25) = 17.3 px of the renderer's true iris,
#: of the largest size where the appearance estimate was measured to help (8-12 px: RMS-S2S down 21-55 % on eleven
#: of twelve dev clips, pitch r up on ten) and the size where it did not (25 px: no better than the limbus fit,
#: pitch r a little lower on one grid cell), times :data:`LIMBUS_FIT_PER_TRUE_IRIS` (the fit reads below the
#: truth) = 16.8 px of the fit's diameter; by a rule written before measuring (a unit correction when the ratio
#: is more than 2 % from 1). Set between the measured sizes, not tuned to a test. Where :func:`switch_iris_px`
#: falls back to the face mesh (fewer than :data:`MIN_SCALE_FITS` open-eye fits) the same threshold is compared
#: with the mesh's diameter, which reads ABOVE the truth (same 24 cells: median 1.048 of it; the 20 dark-iris
#: cells 0.993-1.065, median 1.050): there the switch errs towards the limbus fit, a known, small inconsistency
#: (it read the light-iris cells at 0.907 and 0.968 of the truth and the hazel ones at 1.009: no one factor fits).
SMALL_FACE_BELOW_PX = round(float(np.sqrt(12.0 * 25.0)) * LIMBUS_FIT_PER_TRUE_IRIS, 1)
#: below this many seconds of open-eye frames to learn from (the eye that had fewer), the plain-words line says the
#: clip is short for the estimate. Measured on seven rendered 640x480 CRF 28 clips (12 and 8.5 px irises, both
#: faces, four hand-coded trials end to end; docs/notes/gaze-measurement.md, "Clip length"): the same first 8 s
#: read a lower RMS-S2S on all seven when the estimate learnt from the whole 40 s than from those 8 s
#: (e.g. 2.67 -> 1.61 deg), pitch r higher on six; from 20 s, in between on the two measured. A held-out eighth
#: draw (other trials) read 2.08 -> 2.10 deg, pitch r 0.844 -> 0.902
WELL_LEARNT_S = 40.0
#: what to do about it, in the plain-words line and the verdict alike
SHORT_CLIP_ADVICE = (f"on rendered clips with 8.5-12 px irises it was usually more precise when it learnt from "
                     f"{WELL_LEARNT_S:g} s - process whole recordings, and cut them into tasks with a segments file "
                     "rather than into short clips.")
#: frames whose eye aperture is at least this share of the clip's open-eye level count as open eyes
OPEN_EYE_REL = 0.8
#: where the iris's size in pixels (the metric scale) comes from (GazeParams.iris_scale)
IRIS_SCALES = ("limbus", "mesh")
#: the shapes the limbus fit can take the iris's picture to have (GazeParams.iris_shape)
IRIS_SHAPES = ("circle", "ellipse")
#: fewest open-eye limbus fits (both eyes' together) for the limbus scale; with fewer the face mesh's is used
MIN_SCALE_FITS = 30


@dataclass
class GazeParams:
    """Parameters of the gaze and blink estimate.

    Attributes
    ----------
    blink_rel_threshold : float
        Eyelid aperture relative to the open-eye level below which a frame is
        a blink (0.3-0.9; default 0.6), the two eyes' mean or either eye's
        own (:func:`blink_frames`).
    blink_pad_ms : float
        Time marked invalid on each side of a blink, in ms (0-150; default 40),
        converted to whole frames with the clip's median frame interval
        (rounded, half a frame up: one frame at 30 fps, two at 60, none below
        0.5 frame).
        Run settings from before it replaced ``blink_pad_frames`` read with
        :meth:`GazeParams.from_dict` (n frames -> 40 n ms).
    refine_iris : bool
        Refine the face mesh's iris centre by fitting the iris disc on the
        image by a circle fit to the limbus (aspectus.webcam.limbus; default True).
    max_head_yaw_deg : float
        Frames with the head turned further than this are invalid (default 45).
    head_smooth_ms : float
        Width of the centred moving average applied to the head pose before
        it places the eyeball centres (0 = off; default 300 ms). The head
        moves slowly next to the eyes, while the pose from one frame's
        landmarks jitters by about half a degree - which would move the
        eyeball centre by a third of a millimetre and the gaze by 1-2 deg.
        A centred average has no lag.
    iris_combine : {"auto", "limbus", "rescale", "fuse", "appearance"}
        ``"auto"`` (default): ``"appearance"`` at every iris size (since
        2026-12-05; below 16.8 px of the limbus fit's diameter before), and
        ``"limbus"`` where the appearance estimate cannot run
        (``refine_iris`` or ``eye_anchors`` off, too few open-eye frames)
        or carried no weight; run.json says which was used and why
        (``gaze_model.iris_estimate``, with the clip's iris size).
        ``"limbus"``: with ``refine_iris``, the limbus fit alone, the mesh
        point only where the fit fails; ``"rescale"``: horizontally the limbus
        fit, vertically the face mesh's steady point rescaled to the limbus
        fit's gain; ``"fuse"``: both averaged (:func:`fuse_iris_centres`).
        Evidence on rendered clips (DEVELOPERS.md): "rescale" agrees far
        better with a reference recording under the default I-DT detector
        (per-window fixation counts r 0.91 against 0.22) but shortens the
        demo clip p01's median fixation to 133 ms (limbus: 167 ms, truth
        211 ms). Fusing halves the white part of the
        noise and raises the pitch correlation on most rendered clips, but
        what is left is slow, correlated noise that splits fixations under
        the RMS-S2S-adaptive I-DT threshold (demo clip p01: median fixation
        133 ms against a true 211 ms, 167 ms with the limbus fit alone), so it
        is not the default. ``"appearance"``: horizontally the limbus fit,
        vertically the iris height predicted from the eyes' own appearance by
        a regression learnt per clip on the limbus fits
        (:mod:`aspectus.webcam.iris_appearance`; needs ``refine_iris`` and
        ``eye_anchors``). On twelve rendered dev clips (8.5-25 px) it cut
        RMS-S2S by 21-55 % on eleven and raised pitch r on ten (within
        0.002 on the other two), but lowered the fixation kappa against
        hand-coders on five (docs/notes/gaze-measurement.md). On area-drawn
        irises of 25-50 px (16 grid draws at 25 px, four at 36 and 50 px)
        it cut RMS-S2S on every one (25 px mean 1.34 -> 0.79 deg). It keeps
        both eyes' patches, 768 bytes a frame (some 80 MB an hour at 30
        fps), in a temporary file until the clip's end.
    decouple_reference : bool
        Remove the part of the eyeball centres' vertical motion that follows
        the eyes (:func:`decouple_reference`; default True). The face mesh
        shifts its rigid points up when the eyes look up, and the eyeball
        centres placed by the head pose follow, cancelling a third to a half
        of the vertical gaze signal on rendered clips.
    decouple_highpass_s : float
        Width of the local quadratic fit whose residuals the coupling is
        measured on, s (default 0.7): the head's own motion, smooth over
        that time, does not enter the estimate (a 2-s moving average before
        let slow head drift through and over-read pitch up to twofold).
    eye_anchors : bool
        With ``refine_iris``: place the head (and so the eyeball centres)
        by skin points below the eyes followed on the picture, the rotation
        from PnP held (:mod:`aspectus.webcam.eye_anchors`; default True). False
        keeps the PnP translation from the face mesh's landmarks, which
        moves the eyeball centres by about a millimetre at 5 deg of head
        rotation (median gaze error 3-7 deg with the head turning +-15 deg
        on rendered clips, against 1.5-1.7 deg with the anchors). Needs the
        eye picture, i.e. ``refine_iris``; without it the PnP translation
        is used (run.json counts the frames: ``eye_anchor_frames``,
        ``eye_anchor_fallback_frames``).
    eye_anchor_set : {"auto", "below", "below_and_beside", "below_and_facing_beside", "below_low_cheeks_and_beside", "skin_region"}
        Which skin points the anchors follow (:data:`aspectus.webcam.eye_anchors.ANCHOR_SETS`).
        ``"auto"`` (default): ``"below_and_beside"`` where the iris is
        small - the first frames' and the clip's iris diameter,
        :func:`switch_iris_px`, below :data:`SMALL_FACE_BELOW_PX` (the
        rule ``iris_combine="auto"`` followed too until 2026-12-05) - and ``"below"``
        otherwise, so large faces are placed as before; run.json says which
        was used and why (``gaze_model.eye_anchor_set``). Measured with the
        default chain on fourteen held-out small-face clips (8.4-12.1 px,
        640 x 480 CRF 28, eight with the head turning +-15 deg;
        bench/bench_anchor_sets.py): RMS-S2S no higher on any, yaw r up on
        ten (by 0.04-0.38 on all seven astronaut-face clips) and down by
        0.01-0.06 on four hopper-face ones (yaw gain 0.91 -> 0.78 on one
        turning clip), pitch r up on ten (by up to 0.10) and down by at
        most 0.007 on four, pitch gain up on twelve; kappa up on seven and
        down on six (-0.09..+0.07). ``"below_and_facing_beside"``
        was no better than ``"below_and_beside"`` there
        (docs/notes/gaze-measurement.md).
        ``"below"``: three below each eye; ``"below_and_beside"``:
        also two beside each eye's outer corner, near the eyeball centres'
        depth, so the PnP rotation's error moves the fitted translation
        less. On five 640 x 480 classroom clips (iris 8.3-12.2 px) it cut
        the head origin's picture-position error from SD 0.16-0.81 to
        0.10-0.51 mm sideways and 0.12-0.89 to 0.06-0.65 mm vertically and
        raised pitch r on all five, but on large faces turning +-15 deg the
        point beside the eye turned away reads worse (median gaze error
        2.14 -> 2.25 and 1.78 -> 1.94 deg on two of three clips, 90th
        percentile 2.94 -> 4.19 on one; docs/notes/gaze-measurement.md).
        ``"below_and_facing_beside"``: the same points, a point beside an
        eye left out of the refit in frames where the head is turned away
        from it by more than 12-14 deg (where its template has foreshortened
        by the tracker's rescale limit:
        :func:`aspectus.webcam.eye_anchors.turn_away_limits_deg`).
        ``"below_low_cheeks_and_beside"`` (also two points on each cheek,
        further from the lower lid) and ``"skin_region"`` (the skin round
        the eyes as one masked region registered to a key frame:
        :mod:`aspectus.webcam.skin_region`): measured at classroom scale and
        left as options - neither placed the head better than
        ``"below_and_beside"`` on a clear majority of held-out clips
        (docs/notes/gaze-measurement.md, "The head's placement at
        classroom scale").
    head_rotation : {"mesh", "skin"}
        Where the head rotation comes from (with ``refine_iris``, which
        sends the picture to the per-frame geometry). ``"mesh"`` (default):
        PnP on the face mesh's rigid points (:mod:`aspectus.webcam.headpose`),
        which follow the eyes: on a still-head 720p clip its pitch error
        moved with the gaze pitch (r -0.85, SD 0.34 deg). ``"skin"``: PnP on
        skin points over the face followed on the picture against key
        frames (:mod:`aspectus.webcam.skin_pose`): there r -0.05, SD 0.02
        deg; at 12 px pitch r 0.657 -> 0.734 on one dev clip (0.916 ->
        0.910 on the other); but with the head turning +-15 deg on 25 px
        clips its median gaze error is 1.96 / 2.17 deg on one face against
        the mesh's 1.70 / 1.31 and 1.98 / 0.85 on the other against 1.54 /
        1.69 (two trajectories), so it is not the default
        (docs/notes/gaze-measurement.md).
    fuse_in_head : bool
        With ``iris_combine`` "fuse" or "rescale": fit the mapping of the
        mesh point onto the limbus scale on both points' offsets from the
        eyeball centre's picture position (the eye's motion in the head),
        not on their picture positions, which head motion dominates
        (default True; False is the mapping before issue 15).
    iris_scale : {"limbus", "mesh"}
        Where the iris's size in pixels - the metric scale of step 1, which
        every gaze angle is inversely proportional to - comes from.
        ``"limbus"`` (default, with ``refine_iris``): the face mesh's
        per-frame diameter taken onto the limbus fit's level, the median
        over the clip's open-eye frames of the fitted circle's diameter over
        the mesh's (:func:`limbus_iris_scale`; the mesh's own where there are
        fewer than :data:`MIN_SCALE_FITS` fits). ``"mesh"``: the face mesh's
        iris outline alone (before issue 15). On twelve rendered dev clips
        (8.5-25 px, CRF 23/28/33 and mp4v, both faces, lids following and
        still, glasses) the mesh read the iris 0.8-8.6 % too large (median
        5.5 %), the limbus fit 0.9 % too large to 4.3 % too small (median
        2.6 % small), with no lean on lid cover (eyes lowest against
        highest third: -2.7 to +3.0 %); on two held-out clips the mesh 4.0
        and 2.0 % large, the limbus fit 3.8 and 5.5 % small. With the limbus
        scale yaw gain moved towards 1 on 7 of 12 dev clips and pitch gain on
        9 (median distance from 1 0.12 -> 0.10 and 0.21 -> 0.16; on the gaze
        grid's 13 cells on 11 and 9), r within 0.003, the head distance's
        median error 4.3 % -> 3.0 % (docs/notes/gaze-measurement.md). run.json
        records both clip medians and which was used
        (``gaze_model.iris_scale``).
    iris_registration : bool
        Fuse the iris centres with the iris's motion between frames, read by
        registering the iris disc in the head-stabilised eye patches
        (:mod:`aspectus.webcam.iris_registration`: Lucas-Kanade increments
        as the process, the absolute centres as observations, a Kalman
        smoother whose gain and noise levels come from the clip itself).
        Needs ``refine_iris`` and ``eye_anchors`` and the eye patches: with
        ``iris_combine="auto"`` only where the appearance estimate is taken
        (iris below 16.8 px); with another ``iris_combine`` the patches are
        sampled for it (0.2-1.0 ms a frame in the per-frame geometry, 768
        bytes a frame on disk). Default False, by a rule written before
        measuring: on the gaze grid's eight small-face cells and fourteen
        held-out rendered clips it lowered the error's SD within the
        coders' fixations on all 22 (mean 1.31 -> 0.85 deg) and raised
        pitch r, but the default detector's fixation kappa against
        hand-coders rose on 10 and fell on 12 (mean +0.009, 12 px CRF 23
        down 0.107, beyond the rule's 0.10) and the saccade-frame step gain
        fell (median 0.75 -> 0.71). The precision tier reads the SD within
        fixations (``noise_sd_deg``) as well as the RMS-S2S, which the
        smoother lowers over three times as much (docs/notes/
        gaze-measurement.md, "The iris's motion from registration between
        frames"); costs about 3 ms a frame at the
        clip's end. run.json: ``gaze_model.iris_registration``.
    iris_shape : {"circle", "ellipse"}
        The shape the limbus fit gives the iris in the picture (needs
        ``refine_iris``). ``"circle"`` (default): a circle. ``"ellipse"``: the
        disc seen obliquely - an ellipse whose minor axis lies along the
        direction in which the eye is turned from the camera, minor/major the
        cosine of the angle between the gaze and the line of sight
        (:func:`aspectus.webcam.limbus.iris_shape`). The circle fit's centre,
        measured from the eyeball centre the head model places under the
        frame's head pose, predicts that ellipse; two more passes fit its
        centre and major radius (the limbus diameter, and so the iris scale,
        is then the major axis). It helps where the eyes look far off the
        camera's axis (a camera well below or above a screen): on five
        rendered target clips with the gaze about 10-40 deg off it the
        known-target check's accuracy after offset improved on all five
        (e.g. 1.68 -> 1.01 deg) and its fitted gains moved towards 1 on four;
        after offset and gain on three; on four held-out ones both improved
        on three. Where the gaze stays within about 15
        deg of the camera it was worse on four of five target clips and mixed
        on seven gaze-grid clips (RMS-S2S lower on four, kappa lower on two),
        and issue 4's end-to-end check would fall below its floor (per-window
        fixation-count r 0.849 -> 0.743), so it is not the default. What limits it is the eyeball centre the
        shape is measured from (about 2 mm off on the rendered faces):
        docs/notes/gaze-measurement.md. The limbus fit costs about 1.5 times
        the CPU (three passes instead of two).
    mirrored : bool
        The clip shows the subject mirrored left to right (as webcam
        software often records it): everything is measured in the mirror
        world and turned back at the end - yaw, head yaw, head roll and the
        head's sideways position change sign and the two eyes' columns swap
        and so do the per-eye records in run.json's ``gaze_model``, which
        name the subject's own eyes either way (:func:`unmirror_record`)
        (default False).
    fill_reflections : bool
        Before the face mesh reads a frame, fill compact near-saturated spots
        on the irises (a screen or lamp mirrored by the cornea) near the last
        frame's iris points (:func:`aspectus.webcam.limbus.fill_iris_reflections`;
        the stages after the mesh read the picture as it is). Default False:
        on the rendered 12 px cell with a screen's reflection it lowered
        RMS-S2S 4.01 -> 2.55 deg, but on two held-out reflection clips it was
        neutral (1.35 -> 1.27 deg, kappa 0.378 -> 0.337) and worse (16.5 px
        1.97 -> 2.76 deg, through the ``auto`` choice of iris estimate), and on
        a 25 px clip without any reflection it filled 2 of 238 frames, which
        moved the mesh's tracking: kappa 0.463 -> 0.390, noise 1.46 -> 1.60 deg
        (docs/notes/gaze-measurement.md, "A screen mirrored by the corneas").
    side_arcs : bool
        With ``refine_iris``: the limbus fit's candidates within 30 deg of the
        horizontal, seen from the circle's centre, count as rim, never as lid
        in front of it (:data:`aspectus.webcam.limbus.SIDE_DEG`: a lid reaches
        them only when it covers half the iris's radius), so the one-sided
        weights apply to the others only. It acts where the limbus fit is
        itself the gaze estimate: large faces under ``iris_combine="auto"``
        and ``"limbus"``, ``"fuse"``, ``"rescale"``; the appearance estimate
        learns from fits without it (while the first frames of an ``auto``
        clip are undecided both are fitted). Default True, by rules written
        before measuring: it lowered RMS-S2S on the gaze grid's four 25 px
        cells (mean 1.46 -> 1.23 deg; 1.53 -> 1.39 on the CRF 28 cell, issue
        15's floor of 1.5 met) and on six held-out 20-26 px clips (mean kappa
        against hand-coders 0.29 -> 0.33), with the small-face cells
        identical; on the end-to-end clip of issue 4 (then the limbus fit)
        drawn anew with eight fresh render seeds the per-window
        fixation-count r stayed (mean 0.872 -> 0.868, one draw below 0.8
        either way; docs/notes/gaze-measurement.md, "the one-sided weights
        kept off the candidates within 30 deg").
    """

    blink_rel_threshold: float = 0.6
    blink_pad_ms: float = 40.0
    refine_iris: bool = True
    max_head_yaw_deg: float = 45.0
    head_smooth_ms: float = 300.0
    iris_combine: str = "auto"
    decouple_reference: bool = True
    decouple_highpass_s: float = 0.7
    eye_anchors: bool = True
    eye_anchor_set: str = "auto"
    head_rotation: str = "mesh"
    mirrored: bool = False
    fuse_in_head: bool = True
    iris_scale: str = "limbus"
    iris_registration: bool = False
    iris_shape: str = "circle"
    fill_reflections: bool = False
    side_arcs: bool = True

    def __post_init__(self):
        from aspectus.errors import ParameterError

        checks = (("blink_rel_threshold", 0.3, 0.9), ("blink_pad_ms", 0.0, 150.0), ("max_head_yaw_deg", 0.0, 90.0),
                  ("head_smooth_ms", 0.0, 2000.0), ("decouple_highpass_s", 0.2, 30.0))
        for name, lo, hi in checks:
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not (lo <= v <= hi):
                raise ParameterError(f"gaze parameter {name} = {v!r} is outside {lo}-{hi}")
        from aspectus.webcam.eye_anchors import ANCHOR_SET_CHOICES

        if self.eye_anchor_set not in ANCHOR_SET_CHOICES:
            raise ParameterError(f"gaze parameter eye_anchor_set = {self.eye_anchor_set!r} is not one of "
                                 f"{', '.join(ANCHOR_SET_CHOICES)}")
        if self.iris_scale not in IRIS_SCALES:
            raise ParameterError(f"gaze parameter iris_scale = {self.iris_scale!r} is not one of "
                                 f"{', '.join(IRIS_SCALES)}")
        if self.iris_shape not in IRIS_SHAPES:
            raise ParameterError(f"gaze parameter iris_shape = {self.iris_shape!r} is not one of "
                                 f"{', '.join(IRIS_SHAPES)}")
        if self.head_rotation not in ("mesh", "skin"):
            raise ParameterError(f"gaze parameter head_rotation = {self.head_rotation!r} is not one of mesh, skin")
        if self.iris_combine not in IRIS_COMBINE:
            raise ParameterError(f"gaze parameter iris_combine = {self.iris_combine!r} is not one of "
                                 f"{', '.join(IRIS_COMBINE)}")
        for name in ("refine_iris", "decouple_reference", "eye_anchors", "mirrored", "fuse_in_head",
                     "iris_registration", "fill_reflections", "side_arcs"):
            if not isinstance(getattr(self, name), bool):
                raise ParameterError(f"gaze parameter {name} must be true or false, got {getattr(self, name)!r}")
        if self.iris_combine == "appearance" and not (self.refine_iris and self.eye_anchors):
            raise ParameterError("gaze parameter iris_combine = 'appearance' needs refine_iris and eye_anchors "
                                 "(the eye patches are read from the eye picture in a frame the eye anchors place): "
                                 "set both true, or choose iris_combine limbus, rescale or fuse")
        if self.iris_registration and not (self.refine_iris and self.eye_anchors):
            raise ParameterError("gaze parameter iris_registration needs refine_iris and eye_anchors (the iris is "
                                 "registered in eye patches read from the eye picture in a frame the eye anchors "
                                 "place): set both true, or iris_registration false")
        if self.iris_shape == "ellipse" and not self.refine_iris:
            raise ParameterError("gaze parameter iris_shape = 'ellipse' needs refine_iris (the ellipse is the shape "
                                 "the limbus fit gives the iris): set refine_iris true, or choose iris_shape circle")
        if self.head_rotation == "skin" and not self.refine_iris:
            raise ParameterError("gaze parameter head_rotation = 'skin' needs refine_iris (the skin points are "
                                 "followed on the picture sent with the eye crop): set refine_iris true, or choose "
                                 "head_rotation mesh")

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: dict | None) -> GazeParams:
        """Gaze settings as run.json and study files store them; the older ``blink_pad_frames`` (frames, meant
        at 30 fps) is read as ``blink_pad_ms`` = 40 ms per frame, which gives the same frames at 25-30 fps."""
        from aspectus.errors import ParameterError

        if d is not None and not isinstance(d, dict):
            raise ParameterError(f"the gaze settings are not name: value pairs (found {type(d).__name__})",
                                 hint="write them as a JSON object, e.g. {\"mirrored\": true}")
        d = renamed_settings_read(d)
        known = set(cls.__dataclass_fields__)
        for name in d:
            if name == "blink_pad_frames":
                raise ParameterError(f"gaze parameter blink_pad_frames = {d[name]!r} is not a number of frames",
                                     hint="give blink_pad_ms, the pad in ms (0-150; 40 ms is one frame at 25-30 fps)")
            if name not in known:
                raise ParameterError(f"unknown gaze parameter {name!r}", hint="known: " + ", ".join(sorted(known)))
        return cls(**d)


def renamed_settings_read(d: dict | None) -> dict:
    """A copy of stored gaze settings (run.json, a study file) with the older names read as today's: the older
    ``blink_pad_frames`` n (frames, meant at 30 fps) as ``blink_pad_ms`` = 40 n ms (when both are there, the
    newer one holds)."""
    d = dict(d or {})
    if "blink_pad_frames" in d:
        n = d.pop("blink_pad_frames")
        if "blink_pad_ms" not in d:
            if isinstance(n, bool) or not isinstance(n, (int, float)):
                d["blink_pad_frames"] = n  # not a number of frames: left under its old name
            else:
                d["blink_pad_ms"] = 40.0 * n
    return d


@dataclass(frozen=True)
class GazeChoice:
    """One gaze-measurement setting as the desktop app offers it: a :class:`GazeParams` field in plain words.

    Attributes
    ----------
    name : str
        The :class:`GazeParams` field.
    label : str
        What the setting is called on screen.
    help : str
        What the setting decides, in plain words.
    options : tuple of (value, text, help)
        The allowed values (the field's default first), each with its screen text and when to choose it.
    """

    name: str
    label: str
    help: str
    options: tuple

    @property
    def values(self) -> tuple:
        return tuple(o[0] for o in self.options)

    def text_of(self, value) -> str:
        """The screen text of ``value`` (its repr when the value is not one of the options)."""
        return next((t for v, t, _ in self.options if _same_choice(v, value)), repr(value))


def _same_choice(a, b) -> bool:
    """Equal and of the same type (so ``1`` is not taken for ``True``, nor ``"true"`` for it)."""
    return type(a) is type(b) and a == b


#: the gaze-measurement settings the desktop app shows (in this order), each value with plain text and help;
#: from :class:`GazeParams`' docstring and README's gaze section. They change the samples, so a clip must be
#: processed again for them to take effect (unlike the detection settings).
GAZE_CHOICES: tuple[GazeChoice, ...] = (
    GazeChoice(
        "iris_combine", "Iris height from",
        "How the height of the iris centre in the picture is measured; it decides how well up/down gaze is read.",
        (("auto", "automatic: the eye's appearance (default)",
          "Uses the eye's appearance, and the circle fit where the appearance cannot be learnt (too few frames with "
          "open eyes). The clip view says which one a clip used. Keep this unless a comparison with a lab eye "
          "tracker tells you otherwise."),
         ("limbus", "circle fit to the iris edge",
          "A circle is fitted to the edge of the iris in every frame. Noisier up and down than the eye's "
          "appearance at every face size we measured; for comparisons."),
         ("appearance", "the eye's appearance",
          "The height is predicted from how the whole eye looks, learnt on each clip from the circle fits: what "
          "the automatic setting uses. It keeps small eye pictures (about 80 MB an hour) while the clip is "
          "processed."),
         ("fuse", "circle fit and face mesh averaged",
          "Averages the circle fit with the face tracker's own iris point: less jitter, but slow drift remains "
          "and can split fixations in two. For comparisons."),
         ("rescale", "face mesh, scaled to the circle fit",
          "Side to side from the circle fit, height from the face tracker's steady iris point scaled to the "
          "circle fit. Agreed best with a lab eye tracker on fixation counts per window in our tests, but "
          "shortened fixations. For comparisons."))),
    GazeChoice(
        "head_rotation", "Head turn measured from",
        "Where the head's rotation comes from; the gaze is corrected for it.",
        (("mesh", "the face tracker (default)",
          "The head's rotation from the face tracker's points. Keep this when students turn their heads a lot."),
         ("skin", "skin texture over the face",
          "Follows small patches of skin over the face. Steadier when the head stays still (up/down gaze read "
          "more fully), but worse on some faces that turn by 15° or more."))),
    GazeChoice(
        "eye_anchor_set", "Eyes placed by skin points",
        "Which skin points are followed to place the eyeballs as the head moves.",
        (("auto", "automatic by face size (default)",
          f"Below and beside each eye where the iris is small in the picture (below {SMALL_FACE_BELOW_PX:g} px "
          "across, as a classroom webcam sees a face), below each eye otherwise. Keep this unless a comparison "
          "with a lab eye tracker tells you otherwise."),
         ("below", "below each eye",
          "Three points below each eye. Best for faces that are large in the picture."),
         ("below_and_beside", "below and beside each eye",
          "Also two points beside each eye's outer corner. Steadier for small faces (a classroom webcam); on "
          "large faces worse when the head turns far to one side."),
         ("below_and_facing_beside", "below, and beside when facing the camera",
          "As the previous choice, but a point beside an eye is left out while the head is turned away from it "
          "(by more than about 12°)."),
         ("below_low_cheeks_and_beside", "below, on the cheeks and beside each eye",
          "Also two points on each cheek a little further from the lower lid. For comparisons: in our tests on "
          "small faces it was no better overall than below and beside."),
         ("skin_region", "the skin round the eyes as one patch",
          "Follows the skin below and beside both eyes as one patch, the eyes left out. For "
          "comparisons: in our tests on small faces it read up/down a little more fully but placed the head worse "
          "sideways."))),
    GazeChoice(
        "iris_scale", "Iris size from",
        "The iris's size in the picture sets the scale of every gaze angle (an iris is about 11.7 mm across).",
        (("limbus", "circle fit to the iris edge (default)",
          "The face tracker's iris size, brought to the level of the circle fits over the clip. In our tests the "
          "face tracker read the iris 1-9 % too large, which made every angle that much too small."),
         ("mesh", "the face tracker",
          "The face tracker's own iris size in every frame. For comparisons with results made before the circle "
          "fit's size was used."))),
    GazeChoice(
        "iris_shape", "Iris outline fitted as",
        "The shape fitted to the iris's edge. Seen from the side, the round iris looks like an oval.",
        (("circle", "a circle (default)",
          "A circle is fitted to the visible edge. Keep this when the camera sits close to the screen the "
          "students look at."),
         ("ellipse", "an oval that follows the eye's turn",
          "The oval the iris makes when the eye looks well away from the camera (a camera far below, beside or "
          "above the screen). In our tests it read gaze more accurately with eyes 20-40° off the camera's axis "
          "and a little worse nearer it. For comparisons."))),
    GazeChoice(
        "iris_registration", "Iris movement between frames",
        "Whether the iris's small movements from one frame to the next are also read from the whole iris picture.",
        ((False, "each frame measured on its own (default)",
          "Every frame's iris position is measured by itself. Keep this unless a comparison with a lab eye "
          "tracker tells you otherwise."),
         (True, "also followed from frame to frame",
          "The iris is also followed from each frame to the next and combined with each frame's own measurement: "
          "less jitter and less slow wander where the iris is small in the picture (a classroom webcam), but in our "
          "tests the fixations found agreed with expert coders no better on average (better on some clips, worse "
          "on others) and saccades read a little smaller. The quality verdict reads how far the gaze wanders "
          "within fixations as well as its jitter, so it does not rate the smoothed gaze steadier than it is. "
          "Acts where the eye's appearance is used, or with another choice of iris height; costs a few "
          "milliseconds a frame."))),
    GazeChoice(
        "mirrored", "The clips show the student",
        "Whether the recording is a mirror image (as webcam software often shows and records the picture).",
        ((False, "as the camera saw them (default)",
          "The picture is as the camera saw it: the student's right eye is on the picture's left."),
         (True, "mirrored left to right",
          "For recordings made mirrored: left-right gaze and head turn would otherwise come out with the wrong "
          "sign."))),
)
#: :data:`GAZE_CHOICES` by field name
GAZE_CHOICE_OF = {c.name: c for c in GAZE_CHOICES}


def gaze_settings_from_stored(stored) -> tuple[dict, list[str]]:
    """Gaze settings read back from a saved study: the usable ones, and a sentence per value that was not.

    ``stored`` is the ``gaze`` entry of saved processing settings (``None`` for a study saved before it
    existed: every setting takes its default, without a message). A value of a :data:`GAZE_CHOICES` setting
    that is not one of its options, a name :class:`GazeParams` does not know, or a combination it refuses is
    left out, so the default is used, with a sentence naming the setting in plain words.

    Returns
    -------
    settings : dict
        The valid entries (``GazeParams(**settings)`` is accepted).
    notes : list of str
        One sentence per value left out.

    Examples
    --------
    >>> gaze_settings_from_stored({"iris_combine": "limbus", "mirrored": True})
    ({'iris_combine': 'limbus', 'mirrored': True}, [])
    >>> settings, notes = gaze_settings_from_stored({"iris_combine": "sideways"})
    >>> settings, notes[0][:61]
    ({}, 'The saved setting "Iris height from" had the value \\'sideways\\'')
    """
    from aspectus.errors import ParameterError

    if stored is None:
        return {}, []
    if not isinstance(stored, dict):
        return {}, [f"The saved gaze measurement settings are not readable (found {type(stored).__name__}, "
                    "expected name: value pairs); every gaze setting is at its default."]
    stored = renamed_settings_read(stored)
    fields = GazeParams().to_dict()
    out, notes = {}, []
    for name, value in stored.items():
        choice = GAZE_CHOICE_OF.get(name)
        if choice is not None:
            if any(_same_choice(v, value) for v in choice.values):
                out[name] = value
            else:
                notes.append(f"The saved setting \"{choice.label}\" had the value {value!r}, which is not one of "
                             f"its choices ({'; '.join(t for _, t, _ in choice.options)}); the default "
                             f"\"{choice.options[0][1]}\" is used.")
        elif name in fields:
            out[name] = value
        else:
            notes.append(f"The saved gaze setting {name!r} is not known to this version; it is left out.")
    try:
        GazeParams(**out)
    except (ParameterError, TypeError) as exc:
        shown = {k: v for k, v in out.items() if k in GAZE_CHOICE_OF}
        notes.append(f"The saved gaze settings do not go together ({exc}); "
                     + ("only the ones the app shows are kept." if shown else "every gaze setting is at its default."))
        out = shown
        try:
            GazeParams(**out)
        except (ParameterError, TypeError):
            out = {}
    return out, notes


def learnt_briefly_s(info: dict) -> float | None:
    """The seconds run.json's ``iris_estimate`` says the appearance estimate learnt from (``learnt_from_s``) when
    it was used and learnt from less than :data:`WELL_LEARNT_S`; None otherwise (or without the figure)."""
    learnt = info.get("learnt_from_s") if info.get("used") == "appearance" else None
    ok = isinstance(learnt, (int, float)) and not isinstance(learnt, bool) and learnt < WELL_LEARNT_S
    return float(learnt) if ok else None


def describe_iris_estimate(info) -> str | None:
    """run.json's ``extraction.gaze_model.iris_estimate`` in plain words (None without one).

    Examples
    --------
    >>> describe_iris_estimate({"setting": "limbus", "used": "limbus"})
    'Iris height from: circle fit to the iris edge (as chosen).'
    >>> describe_iris_estimate({"setting": "auto", "used": "appearance", "iris_px": 24.9,
    ...                         "iris_px_source": "limbus fit", "learnt_from_s": 95.2})
    "Iris height from: the eye's appearance (chosen automatically)."

    A short clip gives the estimate little to learn from (:data:`WELL_LEARNT_S`):
    >>> print(describe_iris_estimate({"setting": "auto", "used": "appearance", "learnt_from_s": 7.9}))
    Iris height from: the eye's appearance (chosen automatically), learnt from 7.9 s of open eyes: on rendered
    clips with 8.5-12 px irises it was usually more precise when it learnt from 40 s - process whole recordings,
    and cut them into tasks with a segments file rather than into short clips.
    >>> print(describe_iris_estimate({"setting": "auto", "used": "limbus", "reason": "the appearance regression was "
    ...                               "not fitted (too few open-eye frames with a limbus fit)"}))
    Iris height from: circle fit to the iris edge (chosen automatically: the clip has too few frames with open eyes to learn the eye's appearance).

    A run.json written before 2026-12-05 records the size threshold ``"auto"`` then chose by (``threshold_px``):
    >>> print(describe_iris_estimate({"setting": "auto", "used": "appearance", "iris_px": 11.2,
    ...                               "iris_px_source": "limbus fit", "threshold_px": 16.8}))
    Iris height from: the eye's appearance (chosen automatically: the circle fit measures the iris 11.2 px across, below 16.8 px).

    One written before the choice read the limbus fit's size gives the face mesh's as ``median_iris_px``.
    """
    if not isinstance(info, dict) or not info.get("used"):
        return None
    used, setting = info.get("used"), info.get("setting")
    words = {"face mesh": "the face tracker's iris point"}
    text = words.get(used) or GAZE_CHOICE_OF["iris_combine"].text_of(used).removesuffix(" (default)")
    if setting != "auto":
        if used != setting and setting in GAZE_CHOICE_OF["iris_combine"].values:  # e.g. appearance not learnt
            chosen = GAZE_CHOICE_OF["iris_combine"].text_of(setting).removesuffix(" (default)")
            return f"Iris height from: {text} (chosen: {chosen}, which could not be used with this clip or settings)."
        return f"Iris height from: {text} (as chosen)."
    px = info.get("iris_px", info.get("median_iris_px"))
    reason = str(info.get("reason") or "")
    if "not fitted" in reason:  # the appearance regression had too few open-eye frames to learn from
        obstacle = "the clip has too few frames with open eyes to learn the eye's appearance"
    elif "no weight" in reason:  # fitted, but the limbus fit alone agreed better between the eyes
        obstacle = "the eye's appearance agreed less between the two eyes than the circle fit did"
    elif "needs" in reason:  # refine_iris or eye_anchors switched off
        obstacle = "the eye's appearance cannot be used with the other gaze settings chosen"
    else:
        obstacle = reason
    threshold = info.get("threshold_px")  # runs from before 2026-12-05, when "auto" chose by the iris size
    if threshold is None:
        if used != "appearance":
            return f"Iris height from: {text} (chosen automatically: {obstacle})."
        learnt = learnt_briefly_s(info)
        if learnt is not None:
            return (f"Iris height from: {text} (chosen automatically), learnt from {learnt:g} s of open eyes: "
                    + SHORT_CLIP_ADVICE)
        return f"Iris height from: {text} (chosen automatically)."
    if isinstance(px, (int, float)) and not isinstance(px, bool) and np.isfinite(px):
        small = px < threshold
        # the measure is named: the verdict's "irises about N px across" is the face tracker's, which reads larger
        who = {"limbus fit": "the circle fit measures", "face mesh": "the face tracker measures"}.get(
            info.get("iris_px_source"))
        size = f"{who} the iris {round(px, 1):g} px across" if who else f"the iris is {round(px, 1):g} px across"
        why = f"{size}, {'below' if small else 'not below'} {threshold:g} px"
        if used != "appearance" and small and obstacle:
            why += f", but {obstacle}"
    else:
        why = obstacle or "by face size"
    return f"Iris height from: {text} (chosen automatically: {why})."


def eye_aspect_ratio(points_px: np.ndarray, idx) -> float:
    """EAR = (|p2-p6| + |p3-p5|) / (2 |p1-p4|) (Soukupova & Cech 2016)."""
    p = points_px[list(idx), :2]
    num = np.linalg.norm(p[1] - p[5]) + np.linalg.norm(p[2] - p[4])
    den = 2.0 * np.linalg.norm(p[0] - p[3])
    return float(num / den) if den > 0 else float("nan")


def frame_measurements(points_px: np.ndarray) -> dict:
    """Per-frame quantities the post-pass needs, from one face's landmarks."""
    iris_r = points_px[RIGHT_IRIS_CENTRE, :2]
    iris_l = points_px[LEFT_IRIS_CENTRE, :2]
    d_r = np.linalg.norm(points_px[RIGHT_IRIS_RING[0], :2] - points_px[RIGHT_IRIS_RING[2], :2])
    d_l = np.linalg.norm(points_px[LEFT_IRIS_RING[0], :2] - points_px[LEFT_IRIS_RING[2], :2])
    corners = np.stack([points_px[list(RIGHT_EYE_CORNERS), :2], points_px[list(LEFT_EYE_CORNERS), :2]])
    return {
        "iris_px": np.stack([iris_r, iris_l]),
        "iris_diam_px": np.array([d_r, d_l]),
        "corners_px": corners,
        "ear": np.array([eye_aspect_ratio(points_px, RIGHT_EAR_POINTS), eye_aspect_ratio(points_px, LEFT_EAR_POINTS)]),
    }


def relative_aperture(found: np.ndarray, ear: np.ndarray) -> tuple[np.ndarray, float]:
    """Each frame's eye aspect ratio (mean of both eyes) over the clip's open-eye level (the median over the
    frames with a face), and that level; NaN where there is none."""
    found = np.asarray(found, bool)
    n = len(found)
    ear_mean = _nanmean_quiet(ear, axis=1) if n else np.full(n, np.nan)
    open_level = float(np.nanmedian(ear_mean[found])) if found.any() else float("nan")
    if np.isfinite(open_level) and open_level > 0:
        return ear_mean / open_level, open_level
    return np.full(n, np.nan), open_level


def blink_frames(found: np.ndarray, ear: np.ndarray, threshold: float) -> np.ndarray:
    """The frames of blinks (before the pad): frames with a face where the two eyes' mean aperture, or either
    eye's own, is below ``threshold`` of its open level (:func:`relative_aperture`; each eye's own: its eye aspect
    ratio over its median over the frames with a face). The lids of a blink close together (a blink is
    bilateral; from memory), so where the face mesh reads one eye's closed lid as only partly closed - behind
    spectacle rims one eye read 0.72-0.86 of its open level on closed-lid frames where the other read 0.41-0.45,
    and both 0.25-0.4 without the spectacles (rendered clips; docs/notes/gaze-measurement.md) - the eye that reads
    closed is believed, and
    the gaze of the iris under the closing lids (14-22 deg off there) is not taken as valid. Every frame the mean
    alone marks is still marked."""
    found = np.asarray(found, bool)
    ear = np.asarray(ear, float)
    rel, _ = relative_aperture(found, ear)
    with np.errstate(invalid="ignore"):
        closed = found & (rel < threshold)
    if not found.any() or ear.ndim != 2:
        return closed
    level = np.array([np.nanmedian(ear[found, e]) if np.isfinite(ear[found, e]).any() else np.nan
                      for e in range(ear.shape[1])])
    with np.errstate(invalid="ignore", divide="ignore"):
        own = np.where(level > 0, ear / level, np.nan)
        closed |= found & np.any(own < threshold, axis=1)
    return closed


def blink_pad_frames(pad_ms: float, t_s: np.ndarray) -> int:
    """``pad_ms`` as whole frames at the median interval of the frame times ``t_s`` (rounded; 0 without two
    frames): the blink pad is a time, so a 60 fps clip pads as long as a 30 fps one."""
    t = np.asarray(t_s, float)
    dt = np.diff(t[np.isfinite(t)])
    dt = dt[dt > 0]
    if not len(dt) or pad_ms <= 0:
        return 0
    # half a frame rounds up, within a tolerance for the last bits of the frame times (round() would round half
    # to even, and the same clip starting at another time would pad by a frame more or less)
    return int(np.floor(float(pad_ms) / (1000.0 * float(np.median(dt))) + 0.5 + 1e-6))


def _dilate(mask: np.ndarray, n: int) -> np.ndarray:
    if n <= 0 or not mask.any():
        return mask.copy()
    out = mask.copy()
    for k in range(1, n + 1):
        out[k:] |= mask[:-k]
        out[:-k] |= mask[k:]
    return out


def smooth_pose(R: np.ndarray, t: np.ndarray, found: np.ndarray, t_s: np.ndarray, width_ms: float):
    """Centred moving average of head rotations (as rotation vectors) and translations.

    Runs of consecutive frames with a face are smoothed separately; the
    window is ``width_ms`` converted to frames with the run's median frame
    interval. Returns smoothed copies (R, t).
    """
    from scipy.ndimage import uniform_filter1d
    from scipy.spatial.transform import Rotation

    R = R.copy()
    t = t.copy()
    if width_ms <= 0 or not found.any():
        return R, t
    edges = np.flatnonzero(np.diff(np.r_[0, found.astype(np.int8), 0]))
    for a, b in zip(edges[::2], edges[1::2]):
        if b - a < 3:
            continue
        dt = np.median(np.diff(t_s[a:b])) if b - a > 1 else 1 / 30
        k = int(round(width_ms / 1e3 / max(dt, 1e-3)))
        if k < 2:
            continue
        k = min(k | 1, (b - a) | 1)
        rv = Rotation.from_matrix(R[a:b]).as_rotvec()
        rv = uniform_filter1d(rv, k, axis=0, mode="nearest")
        R[a:b] = Rotation.from_rotvec(rv).as_matrix()
        t[a:b] = uniform_filter1d(t[a:b], k, axis=0, mode="nearest")
    return R, t


def _nanmean_quiet(a, *, axis):
    """``np.nanmean`` without the all-NaN RuntimeWarning (frames without a face are all-NaN rows)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.nanmean(a, axis=axis)


def _step_noise(x: np.ndarray) -> float:
    """Robust noise SD of a trace from its sample-to-sample steps (median |step| x 1.4826 / sqrt 2)."""
    d = np.diff(x[np.isfinite(x)])
    return float(1.4826 * np.median(np.abs(d)) / np.sqrt(2)) if len(d) >= 10 else float("nan")


def _deming_slope(x: np.ndarray, y: np.ndarray, sx: float, sy: float) -> float:
    """Slope of y on x when both carry noise of SD sx and sy (Deming regression)."""
    if not (np.isfinite(sx) and np.isfinite(sy)) or sx <= 0:
        return float("nan")
    lam = (sy / sx) ** 2
    xm, ym = x - x.mean(), y - y.mean()
    sxx, syy, sxy = np.mean(xm * xm), np.mean(ym * ym), np.mean(xm * ym)
    if sxy == 0:
        return float("nan")
    d = syy - lam * sxx
    return float((d + np.sqrt(d * d + 4 * lam * sxy * sxy)) / (2 * sxy))


def _mesh_on_limbus_scale(L: np.ndarray, M: np.ndarray, both: np.ndarray) -> tuple[np.ndarray, float, float]:
    """The mesh trace ``M`` mapped onto the limbus trace ``L``'s scale, ``a + b * M``, by Deming regression over
    the frames ``both`` with the noise variances from the two traces' steps (:func:`fuse_iris_centres`).

    Returns the mapped trace and the slope ``b``, or ``(M, nan, nan)`` where the mapping cannot be fitted (fewer
    than 30 frames, a mesh that does not move)."""
    if both.sum() < 30 or np.std(M[both]) <= 0:
        return M, float("nan"), float("nan")
    b = _deming_slope(M[both], L[both], _step_noise(np.where(both, M, np.nan)),
                      _step_noise(np.where(both, L, np.nan)))
    b = float(np.clip(b, 0.5, 5.0)) if np.isfinite(b) else 1.0  # a mesh that does not move cannot be rescaled
    a = float(np.median(L[both] - b * M[both]))
    return a + b * M, b, a


def fuse_iris_centres(limbus_px: np.ndarray, mesh_px: np.ndarray, ok: np.ndarray, *,
                      average: bool = True, ref_px: np.ndarray | None = None) -> tuple[np.ndarray, dict]:
    """Combine the limbus fit and the face mesh's iris point, per eye and picture axis.

    The limbus fit is unbiased but noisy; the mesh's point is steady but
    follows the eye with too small a gain, vertically in particular (0.2-0.6
    on rendered clips). So, over the clip's open-eye frames, the mesh point is
    first mapped onto the limbus scale, ``limbus ~ a + b * mesh``, by Deming
    regression (Deming 1943) with the two noise variances estimated from
    their sample-to-sample steps - ordinary least squares would shrink the
    slope by the mesh's own noise - then the two are averaged with
    inverse-variance weights. Frames without a
    limbus fit (NaN) use the rescaled mesh point alone.

    ``ref_px`` (N, 2, 2), optional: a point per eye that moves with the head
    but not with the eyes (the eyeball centre's picture position). The mapping is then
    fitted to both centres' offsets from it, i.e. to the eye's motion in
    the head: with the head moving, the picture positions are dominated by
    the head's motion, which both sources follow with gain 1, and a mapping
    fitted to them left the mesh point's eye motion at its own low gain
    (pitch gain 0.5-0.6 of the fused estimate on rendered clips with head
    drift and turns).

    Returns the fused (N, 2, 2) centres and a record (slopes, noise, weights).
    """
    out = np.array(mesh_px, float).copy()
    rec: dict = {}
    for e, eye in enumerate(("right", "left")):
        for axis, name in ((0, "x"), (1, "y")):
            base = ref_px[:, e, axis] if ref_px is not None else 0.0
            L = limbus_px[:, e, axis] - base
            M = mesh_px[:, e, axis] - base
            key = f"{eye}_{name}"
            if not average and axis == 0:
                # horizontally the limbus fit is both unbiased and the steadier (0.2 px against the
                # mesh's 0.35 px on rendered clips): nothing to gain from the mesh
                out[:, e, axis] = np.where(np.isfinite(L), L, M) + base
                rec[key] = {"fused": False, "source": "limbus"}
                continue
            both = ok & np.isfinite(L) & np.isfinite(M)
            Mc, b, _ = _mesh_on_limbus_scale(L, M, both)
            if not np.isfinite(b):
                out[:, e, axis] = np.where(np.isfinite(L), L, M) + base
                rec[key] = {"fused": False}
                continue
            sl, sm = _step_noise(np.where(both, L, np.nan)), _step_noise(np.where(both, Mc, np.nan))
            wl = 1.0 / sl ** 2 if np.isfinite(sl) and sl > 0 and average else 0.0
            wm = 1.0 / sm ** 2 if np.isfinite(sm) and sm > 0 else 0.0
            if wl + wm == 0:
                wl, wm = (1.0, 1.0) if average else (0.0, 1.0)
            fused = np.where(np.isfinite(L), (wl * L + wm * Mc) / (wl + wm), Mc)
            out[:, e, axis] = fused + base
            rec[key] = {"fused": True, "mesh_gain": round(b, 3), "limbus_noise_px": round(sl, 3),
                        "mesh_noise_px": round(sm, 3), "limbus_weight": round(wl / (wl + wm), 3)}
    return out, rec


#: the longest run of frames without a limbus fit that :func:`fill_iris_gaps` bridges, s: shorter than a typical
#: fixation (some 200-400 ms, common practice), so that at most one saccade falls inside a bridged gap
MAX_IRIS_GAP_S = 0.3


def fill_iris_gaps(iris_px: np.ndarray, ref_px: np.ndarray, found: np.ndarray, t_s: np.ndarray, *,
                   max_gap_s: float = MAX_IRIS_GAP_S) -> tuple[np.ndarray, dict]:
    """Bridge short runs of frames without a limbus fit (NaN in ``iris_px``) by interpolating the fitted
    centres' offsets from ``ref_px``, the eyeball centres' picture positions, over time.

    The fit fails on a frame when too few limbus candidates are left or the circle lands too far from the mesh
    point (lids half over the iris, looking down or far up). The face mesh's own iris point, which those frames
    used to take, follows the eye with a low vertical gain: on a 25-px rendered clip it was 2-3 px off vertically
    there (so the gaze stepped by some 5-8 deg whenever the source changed, and those steps were most of the
    error's frame-to-frame RMS). The eye's position in the head between two fits is bridged linearly instead
    (the head's own motion stays in ``ref_px``). Gaps longer than ``max_gap_s``, and those at the clip's ends,
    stay NaN (the caller takes the mesh point there).

    ``iris_px`` (N, 2, 2) px, NaN where there is no fit; ``ref_px`` (N, 2, 2); ``found`` (N,) face tracked;
    ``t_s`` (N,) frame times. Returns the filled centres and a record: per eye the frames filled and left.
    """
    out = np.array(iris_px, float).copy()
    rec: dict = {}
    t = np.asarray(t_s, float)
    for e, eye in enumerate(("right", "left")):
        off = out[:, e] - ref_px[:, e]
        fit = np.isfinite(off).all(axis=1)
        gap = found & ~fit
        filled = 0
        if fit.sum() >= 2 and gap.any():
            idx = np.flatnonzero(fit)
            # each gap frame's nearest fits before and after it
            g = np.flatnonzero(gap)
            after = np.searchsorted(idx, g)
            inside = (after > 0) & (after < len(idx))
            g, after = g[inside], after[inside]
            lo, hi = idx[after - 1], idx[after]
            short = (t[hi] - t[lo]) <= max_gap_s + 1e-9
            g, lo, hi = g[short], lo[short], hi[short]
            ok_ref = np.isfinite(ref_px[g, e]).all(axis=1)
            g, lo, hi = g[ok_ref], lo[ok_ref], hi[ok_ref]
            w = ((t[g] - t[lo]) / (t[hi] - t[lo]))[:, None]
            out[g, e] = (1 - w) * off[lo] + w * off[hi] + ref_px[g, e]
            filled = len(g)
        rec[eye] = {"filled_frames": int(filled), "unfilled_frames": int(gap.sum() - filled)}
    return out, rec


def decouple_reference(centres_mm: np.ndarray, iris_px: np.ndarray, K: np.ndarray, ok: np.ndarray,
                       t_s: np.ndarray, *, smooth_ms: float, highpass_s: float = 0.7,
                       max_coupling: float = 1.5) -> tuple[np.ndarray, dict]:
    """Remove the vertical motion of the eyeball centres that follows the eyes, per eye and clip.

    The face mesh moves its "rigid" points with the eyes: when the eyes look
    up, the fitted head - and with it the eyeball centre - moves up too (on
    rendered clips by 0.3-0.5 of the iris's own image motion), so the iris's
    offset from the eyeball centre, the gaze signal, shrinks. A real head
    does not move with every eye movement, so the coupling shows as a
    regression of the eyeball centre's picture height on the iris's height
    relative to it: ``C_y = C_true + m * d_y`` with ``d_y = iris_y - C_y``.
    The iris height is smoothed first by the same moving average as the head
    pose (``smooth_ms``), as the eyeball centre is, before ``d_y`` is taken. ``m`` is the least-squares
    slope over the open-eye frames of the two series' residuals from a
    local quadratic fit over ``highpass_s`` (Savitzky & Golay 1964): what
    is left there is what changes within a fraction of a second - the eyes'
    saccades and whatever follows them - while the head's own motion, smooth
    on that scale, is removed. (A 2-s moving average used before let head
    drift with periods of 3-6 s through; over a few seconds it correlates
    with the gaze by chance and was read as coupling of 0.5-1.2, which
    over-read pitch by that factor: 1.5-2.3 on rendered clips with slow
    head drift, tests/webcam/test_gaze_units.py.) The centre's height is then
    corrected by ``m * (d_y - median d_y)`` (no change at the clip's median
    gaze). ``m`` is kept within ``[0, max_coupling]``.

    Known limit: head movements that go with the eyes within ``highpass_s``
    (a quick nod with a downward saccade) look like coupling and are partly
    removed.

    Parameters
    ----------
    centres_mm : (N, 2, 3) eyeball centres (right, left) in the camera frame, mm.
    iris_px : (N, 2, 2) iris centres in px. K : (3, 3) camera matrix.
    ok : (N,) bool frames to measure on (face found, eyes open).
    t_s : (N,) frame times, s.

    Returns
    -------
    corrected (N, 2, 3) centres and a record {eye: coupling m or None}
    (plus ``{eye}_se``: the slope's standard error, from the residuals with
    one independent sample per head-smoothing window).
    """
    from scipy.ndimage import uniform_filter1d
    from aspectus.events.savgol import savgol_filter

    out = np.array(centres_mm, float).copy()
    rec: dict = {}
    n = len(out)
    f, cy = float(K[0, 0]), float(K[1, 2])
    for e, eye in enumerate(("right", "left")):
        z = out[:, e, 2]
        with np.errstate(invalid="ignore", divide="ignore"):
            c_px = cy + f * out[:, e, 1] / z
        d = iris_px[:, e, 1] - c_px
        use = np.asarray(ok, bool) & np.isfinite(d) & np.isfinite(c_px) & (z > 0)
        idx = np.flatnonzero(use)
        if len(idx) < 30:
            rec[eye] = None
            continue
        dt = float(np.median(np.diff(np.asarray(t_s, float)[idx]))) if len(idx) > 1 else 1 / 30
        dt = max(dt, 1e-3)
        k_s = int(round(smooth_ms / 1e3 / dt)) | 1
        # the quadratic fit's window must be clearly wider than the smoothing, or nothing is left of a saccade
        k_h = max(int(round(highpass_s / dt)) | 1, (2 * k_s + 1) | 1, 7)
        if len(idx) < 2 * k_h or k_h > n:
            rec[eye] = None
            continue
        frames = np.arange(n)
        i_f = np.interp(frames, idx, iris_px[idx, e, 1])
        c_f = np.interp(frames, idx, c_px[idx])
        # the iris is smoothed as the head pose was, and the offset taken from the (already smoothed) centre:
        # smoothing the offset itself would smooth the centre twice, and the slope would read low
        d_s = (uniform_filter1d(i_f, k_s, mode="nearest") if k_s >= 3 else i_f) - c_f
        X = (d_s - savgol_filter(d_s, k_h, 2))[use]
        Y = (c_f - savgol_filter(c_f, k_h, 2))[use]
        sxx = float(X @ X)
        if not sxx > 0:
            rec[eye] = None
            continue
        m_raw = (X @ Y) / sxx
        res = Y - m_raw * X
        n_eff = max(len(X) / max(k_s, 1), 2.0)
        rec[f"{eye}_se"] = round(float(np.sqrt(np.mean(res * res) / (np.mean(X * X) * n_eff))), 3)
        m = float(np.clip(m_raw, 0.0, max_coupling))
        shift_px = m * (d_s - np.median(d_s[use]))
        found = np.isfinite(z) & (z > 0)
        out[found, e, 1] -= shift_px[found] * z[found] / f
        rec[eye] = round(m, 3)
    return out, rec


def limbus_iris_scale(mesh_diam_px: np.ndarray, limbus_diam_px: np.ndarray | None, ok: np.ndarray, *,
                      setting: str = "limbus") -> tuple[float, dict]:
    """The factor that takes the face mesh's iris diameters onto the limbus fit's, for the clip's metric scale.

    ``mesh_diam_px`` and ``limbus_diam_px`` are (N, 2) per eye (NaN where there is none; the limbus fit's is
    the diameter of its circle, :func:`aspectus.webcam.limbus.limbus_centres_many`); ``ok`` (N,) the frames
    to measure on (face found, eyes open). The factor is the median over those frames and both eyes of
    ``limbus / mesh`` (a ratio per frame, so that the head's moving nearer or further does not enter it);
    the per-frame diameters used for the scale are the mesh's times it, which keeps the mesh's steady
    frame-to-frame reading of distance changes and takes the limbus fit's level. With ``setting="mesh"``,
    without the limbus diameters or with fewer than :data:`MIN_SCALE_FITS` ratios, the factor is 1 (the
    face mesh's own diameter).

    Returns the factor and a record for run.json: the setting, the source used, why, both clip medians (px)
    over the frames measured on and the number of limbus fits there.
    """
    ok = np.asarray(ok, bool)
    mesh = np.where(np.asarray(mesh_diam_px, float) > 0, mesh_diam_px, np.nan)
    rec: dict = {"setting": setting,
                 "mesh_median_px": _round_or_none(np.nanmedian(mesh[ok]) if np.isfinite(mesh[ok]).any() else np.nan)}
    if limbus_diam_px is None:
        rec |= {"used": "mesh", "limbus_median_px": None, "limbus_fits": 0,
                "reason": "no limbus fits (refine_iris off)" if setting == "limbus" else "as chosen"}
        return 1.0, rec
    lim = np.where(np.asarray(limbus_diam_px, float) > 0, limbus_diam_px, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = (lim / mesh)[ok]
    ratio = ratio[np.isfinite(ratio)]
    fin = np.isfinite(lim[ok])
    rec |= {"limbus_median_px": _round_or_none(np.median(lim[ok][fin]) if fin.any() else np.nan),
            "limbus_fits": int(len(ratio))}
    factor = float(np.median(ratio)) if len(ratio) else float("nan")
    rec["limbus_to_mesh"] = _round_or_none(factor, 4)
    if setting == "mesh":
        rec |= {"used": "mesh", "reason": "as chosen"}
        return 1.0, rec
    if len(ratio) < MIN_SCALE_FITS or not np.isfinite(factor) or factor <= 0:
        rec |= {"used": "mesh", "reason": f"{len(ratio)} open-eye limbus fits, fewer than {MIN_SCALE_FITS}"}
        return 1.0, rec
    rec |= {"used": "limbus", "reason": f"median of {len(ratio)} open-eye limbus fits"}
    return factor, rec


def median_iris_px(diam: np.ndarray) -> float:
    """The face mesh's figure: the median over frames of the two eyes' mean iris diameter (px; (N, 2), NaN or 0
    where none), NaN if none."""
    d = np.asarray(diam, float).reshape(-1, 2)
    d = np.where(d > 0, d, np.nan)
    ok = np.isfinite(d).any(axis=1)
    return float(np.median(_nanmean_quiet(d[ok], axis=1))) if ok.any() else float("nan")


def switch_iris_px(found: np.ndarray, mesh_diam_px: np.ndarray, limbus_diam_px: np.ndarray | None,
                   ear: np.ndarray) -> dict:
    """The clip's iris diameter on which the ``"auto"`` settings choose (``iris_combine``, ``eye_anchor_set``; the
    eye patches kept or not): one rule for the pipeline's whole-clip choice and the first frames' decisions
    (:func:`aspectus.webcam.iris_appearance.small_iris`).

    The limbus fit's: the median of its circle's diameters (both eyes pooled) over the open-eye frames (face
    found, aperture at least :data:`OPEN_EYE_REL` of the frames' open-eye level, :func:`relative_aperture`) - the
    figure run.json's ``gaze_model.iris_scale.limbus_median_px`` gives over a whole clip. With fewer than
    :data:`MIN_SCALE_FITS` such fits (or no limbus fits: ``refine_iris`` off) the face mesh's
    (:func:`median_iris_px` over the frames with a face), as :func:`limbus_iris_scale` falls back. Arrays are
    (N,) ``found`` and (N, 2) per eye (NaN or 0 where none). Why the fit's: over 24 rendered dark-iris clips it
    read 0.948-0.991 of the renderer's iris diameter, nearer than the mesh's (0.994-1.064) on 20, and the mesh's
    was inflated by the screen's reflection on the corneas and by lids that do not follow the gaze
    (docs/notes/gaze-measurement.md, "The auto switch read on the limbus fit's diameter"). The threshold it is
    compared with, :data:`SMALL_FACE_BELOW_PX`, is on the fit's scale; the face mesh's fallback reads above it.

    Returns ``{"iris_px": the figure (NaN if none), "iris_px_source": "limbus fit" or "face mesh",
    "limbus_fits": the open-eye fits counted, "mesh_iris_px": the face mesh's figure}``.
    """
    found = np.asarray(found, bool)
    mesh = median_iris_px(np.asarray(mesh_diam_px, float)[found]) if found.any() else float("nan")
    out = {"iris_px": mesh, "iris_px_source": "face mesh", "limbus_fits": 0, "mesh_iris_px": mesh}
    if limbus_diam_px is None or not found.any():
        return out
    rel, _ = relative_aperture(found, np.asarray(ear, float))
    with np.errstate(invalid="ignore"):
        eyes_open = found & (rel >= OPEN_EYE_REL)
    lim = np.asarray(limbus_diam_px, float)[eyes_open].ravel()
    lim = lim[np.isfinite(lim) & (lim > 0)]
    out["limbus_fits"] = int(len(lim))
    if len(lim) >= MIN_SCALE_FITS:
        out |= {"iris_px": float(np.median(lim)), "iris_px_source": "limbus fit"}
    return out


def _round_or_none(x, nd: int = 3):
    return round(float(x), nd) if x is not None and np.isfinite(x) else None


def estimate_gaze(*, K: np.ndarray, found: np.ndarray, R: np.ndarray, t: np.ndarray, iris_px: np.ndarray,
                  iris_diam_px: np.ndarray, corners_px: np.ndarray, ear: np.ndarray, t_s: np.ndarray | None = None,
                  iris_mesh_px: np.ndarray | None = None, limbus_diam_px: np.ndarray | None = None,
                  repeated: np.ndarray | None = None,
                  params: GazeParams = GazeParams()) -> tuple[dict, dict]:  # noqa: B008 - a frozen default
    """Gaze, head pose, distance and blinks for a whole clip.

    Parameters
    ----------
    K : (3, 3) camera matrix. found : (N,) bool face tracked.
    R : (N, 3, 3) head->camera rotations; t : (N, 3) translations in model mm.
    iris_px : (N, 2, 2) iris centres (right, left) in px; iris_diam_px : (N, 2).
    corners_px : (N, 2, 2, 2) eye corners [eye][outer, inner][x, y].
    ear : (N, 2) eye aspect ratios.
    t_s : (N,) frame times (for the head-pose smoothing window); default 30 fps.
    iris_mesh_px : (N, 2, 2), optional
        The face mesh's own iris centres when ``iris_px`` holds the limbus
        fit (NaN where the fit failed); the two are combined by
        :func:`fuse_iris_centres`.
    repeated : (N,) bool, optional
        Frames whose picture repeats the frame before's
        (:attr:`aspectus.webcam.video.Frame.repeat`): no new measurement, so
        not valid (``repeated_picture``).

    Returns
    -------
    columns : dict of (N,) arrays named as in :data:`aspectus.schema.SAMPLE_COLUMNS`.
    info : dict with the clip-level figures (scale, open-eye level, eyeball offsets).
    """
    n = len(found)
    found = np.asarray(found, bool)
    nanv = np.full(n, np.nan)
    cols: dict[str, np.ndarray] = {}
    info: dict = {"frames_with_face": int(found.sum())}
    model = face_model()
    if t_s is None:
        t_s = np.arange(n) / 30.0
    R_raw = R
    R, t = smooth_pose(R, t, found, np.asarray(t_s, float), float(params.head_smooth_ms))
    f = K[0, 0]
    Kinv = np.linalg.inv(K)

    # --- metric scale from the iris --------------------------------------
    diam = _nanmean_quiet(np.where(iris_diam_px > 0, iris_diam_px, np.nan), axis=1) if n else nanv
    aperture_rel, open_level = relative_aperture(found, ear)
    eyes_open = found & (aperture_rel >= OPEN_EYE_REL)
    # the iris's size in pixels: the face mesh's, taken onto the limbus fit's level (iris_scale)
    scale_factor, info["iris_scale"] = limbus_iris_scale(iris_diam_px, limbus_diam_px, eyes_open,
                                                         setting=params.iris_scale)
    z_iris = f * IRIS_DIAMETER_MM / (diam * scale_factor)
    # the iris diameter gives the distance of the irises, so it is compared with the depth of the model's iris
    # points (the head origin lies 12 mm further back, between the eyeball centres)
    iris_model = model.points_mm[[RIGHT_IRIS_CENTRE, LEFT_IRIS_CENTRE]].mean(axis=0)
    z_model_iris = np.einsum("nj,j->n", R[:, 2, :], iris_model) + t[:, 2]
    ok_scale = eyes_open & np.isfinite(z_iris) & (z_model_iris > 0)
    s = float(np.nanmedian(z_iris[ok_scale] / z_model_iris[ok_scale])) if ok_scale.sum() >= 3 else 1.0
    info["model_scale"] = s
    info["open_eye_ear"] = open_level

    # --- eyeball centres personalised by the eye corners -----------------
    eyes_model = np.stack([model.eye_right_mm, model.eye_left_mm])  # (2, 3)
    corner_model = np.stack([model.points_mm[list(RIGHT_EYE_CORNERS)].mean(0),
                             model.points_mm[list(LEFT_EYE_CORNERS)].mean(0)])  # (2, 3)
    offsets = np.zeros((2, 3))
    if eyes_open.sum() >= 3:
        idx = np.flatnonzero(eyes_open)
        Rv, tv = R[idx], t[idx]
        for e in range(2):
            mid_px = corners_px[idx, e].mean(axis=1)  # (M, 2)
            ray = np.c_[mid_px, np.ones(len(idx))] @ Kinv.T  # z = 1
            zc = np.einsum("mij,j->mi", Rv, corner_model[e])[:, 2] + tv[:, 2]
            Xc = ray * zc[:, None]
            Xh = np.einsum("mji,mj->mi", Rv, Xc - tv)
            off = np.median(Xh, axis=0) - corner_model[e]
            offsets[e, :2] = off[:2]
        del idx, Rv, tv, mid_px, ray, zc, Xc, Xh
    info["eyeball_offset_mm"] = (offsets * s).round(3).tolist()
    centres_h = eyes_model + offsets  # model mm, head frame

    # --- eyeball centres in the camera frame (placed by the smoothed head pose) ---------------------
    head_mid = t * s  # origin of the head frame (eyeball midpoint), mm
    centres = np.stack([(np.einsum("nij,j->ni", R, centres_h[e]) + t) * s for e in range(2)], axis=1)  # (N, 2, 3)

    # --- iris source per axis ---------------------------------------------
    if iris_mesh_px is not None:
        # the eyeball centres' picture positions: they move with the head, not the eyes
        with np.errstate(invalid="ignore", divide="ignore"):
            ref = np.stack([(centres[:, e, :2] / centres[:, e, 2:3]) * [K[0, 0], K[1, 1]] + [K[0, 2], K[1, 2]]
                            for e in range(2)], axis=1)
        if params.iris_combine in ("fuse", "rescale"):
            iris_px, info["iris_fusion"] = fuse_iris_centres(iris_px, iris_mesh_px, eyes_open,
                                                             average=params.iris_combine == "fuse",
                                                             ref_px=ref if params.fuse_in_head else None)
        else:
            iris_px, info["iris_gaps"] = fill_iris_gaps(iris_px, ref, found, np.asarray(t_s, float))
            iris_px = np.where(np.isfinite(iris_px), iris_px, iris_mesh_px)

    # --- the eyeball centres freed of the eyes' pull on the face mesh -------------------------------
    if params.decouple_reference:
        centres, info["reference_coupling"] = decouple_reference(
            centres, iris_px, K, eyes_open, np.asarray(t_s, float), smooth_ms=float(params.head_smooth_ms),
            highpass_s=float(params.decouple_highpass_s))

    # --- per-eye gaze -----------------------------------------------------
    g_eyes = np.full((n, 2, 3), np.nan)
    for e in range(2):
        C = centres[:, e]  # (N, 3) mm
        ray = np.c_[iris_px[:, e], np.ones(n)] @ Kinv.T
        ok = found & np.all(np.isfinite(ray), axis=1) & np.all(np.isfinite(C), axis=1)
        if ok.any():
            P, _missed = ray_sphere_near(ray[ok], C[ok], IRIS_PLANE_RADIUS_MM)
            g = P - C[ok]
            g /= np.linalg.norm(g, axis=1, keepdims=True)
            g_eyes[ok, e] = g
            del P, g
        del C, ray, ok
    del iris_px, z_iris, z_model_iris
    g_bin = _nanmean_quiet(g_eyes, axis=1)
    norm = np.linalg.norm(g_bin, axis=1, keepdims=True)
    g_bin = g_bin / np.where(norm > 0, norm, np.nan)

    # The columns are filled in place and each intermediate is dropped as soon as it is used: on an hour of
    # video every (N, 3) array is some 2.6 MB and they would otherwise all stay alive until the return.
    yaw, pitch = gaze_vector_to_angles(g_bin)
    ryaw, rpitch = gaze_vector_to_angles(g_eyes[:, 0])
    lyaw, lpitch = gaze_vector_to_angles(g_eyes[:, 1])
    hyaw_e, hpitch_e = gaze_vector_to_angles(np.einsum("nji,nj->ni", R, g_bin))
    del g_eyes, g_bin, norm, centres, R, t
    head_yaw, head_pitch, head_roll = pose_angles(R_raw) if n else (nanv.copy(), nanv.copy(), nanv.copy())
    for a in (head_yaw, head_pitch, head_roll):
        a[~found] = np.nan

    # --- blinks and validity ---------------------------------------------
    closed = blink_frames(found, ear, params.blink_rel_threshold)
    info["blink_pad_frames"] = blink_pad_frames(params.blink_pad_ms, t_s)
    blink = _dilate(closed, info["blink_pad_frames"]) & found
    repeated = np.zeros(n, bool) if repeated is None else np.asarray(repeated, bool)
    valid = (found & ~blink & ~repeated & np.isfinite(yaw) & np.isfinite(pitch)
             & (np.abs(head_yaw) <= params.max_head_yaw_deg))
    del closed

    def only(a, keep):
        a = np.array(a, float)  # a copy: inputs stay untouched
        a[~keep] = np.nan
        return a

    cols["valid"] = valid
    cols["blink"] = blink
    cols["repeated_picture"] = repeated
    for name, a in (("yaw_deg", yaw), ("pitch_deg", pitch), ("left_yaw_deg", lyaw), ("left_pitch_deg", lpitch),
                    ("right_yaw_deg", ryaw), ("right_pitch_deg", rpitch), ("eye_in_head_yaw_deg", hyaw_e),
                    ("eye_in_head_pitch_deg", hpitch_e)):
        a[~valid] = np.nan  # made here, so filled in place
        cols[name] = a
    del yaw, pitch, lyaw, lpitch, ryaw, rpitch, hyaw_e, hpitch_e
    cols["head_yaw_deg"], cols["head_pitch_deg"], cols["head_roll_deg"] = head_yaw, head_pitch, head_roll
    cols["head_x_mm"] = only(head_mid[:, 0], found)
    cols["head_y_mm"] = only(head_mid[:, 1], found)
    cols["head_z_mm"] = only(head_mid[:, 2], found)
    cols["distance_mm"] = only(np.linalg.norm(head_mid, axis=1), found)
    del head_mid
    cols["iris_diameter_px"] = only(diam, found)
    cols["ear_right"] = only(ear[:, 0], found)
    cols["ear_left"] = only(ear[:, 1], found)
    cols["aperture_rel"] = only(aperture_rel, found)
    if params.mirrored:
        unmirror(cols)
        unmirror_record(info)
    return cols, info


def unmirror(cols: dict) -> None:
    """Turn columns measured on a mirrored picture back into the subject's frame (in place).

    In the mirror the subject's right eye is the one the face mesh takes for the left, and every left-right
    quantity changes sign: yaw (binocular, per eye, eye-in-head), head yaw and roll, the head's x.
    """
    for a, b in (("left_yaw_deg", "right_yaw_deg"), ("left_pitch_deg", "right_pitch_deg"), ("ear_left", "ear_right")):
        if a in cols and b in cols:
            cols[a], cols[b] = cols[b], cols[a]
    for c in ("yaw_deg", "left_yaw_deg", "right_yaw_deg", "eye_in_head_yaw_deg", "head_yaw_deg", "head_roll_deg",
              "head_x_mm"):
        if c in cols:
            cols[c] = -np.asarray(cols[c], float)


#: run.json's per-eye lists: [the face mesh's right eye, its left eye], in that order like every per-eye record
PER_EYE_LISTS = ("eyeball_offset_mm", "increments", "frames_fused", "frames_predicted")
#: the per-eye lists whose items are head-frame vectors (x, y, z): mirrored, their x changes sign
PER_EYE_VECTORS = ("eyeball_offset_mm",)
_OTHER_EYE = {"right": "left", "left": "right"}


def _other_eye_key(key):
    """``key`` named for the other eye: ``right`` <-> ``left``, also as a ``right_`` / ``left_`` prefix."""
    if not isinstance(key, str):
        return key
    if key in _OTHER_EYE:
        return _OTHER_EYE[key]
    head, sep, tail = key.partition("_")
    return _OTHER_EYE[head] + sep + tail if sep and head in _OTHER_EYE else key


def unmirror_record(rec):
    """Turn a per-eye record measured on a mirrored picture into the subject's eyes (in place; returned too).

    The one rule for run.json's ``gaze_model``: per-eye entries are keyed ``right`` / ``left`` (or ``right_*`` /
    ``left_*``) or are two-item lists in :data:`PER_EYE_LISTS` ([right, left]), and name the face mesh's eyes as
    measured. In a mirrored picture the mesh's right eye is the subject's left (:func:`unmirror`), so every such
    key swaps with its partner, every such list is reversed, and the head-frame vectors (:data:`PER_EYE_VECTORS`)
    change the sign of x, as the head's own x does. Nested dicts and lists are walked; other values stay.
    """
    if isinstance(rec, list):
        for item in rec:
            unmirror_record(item)
        return rec
    if not isinstance(rec, dict):
        return rec
    items = list(rec.items())
    rec.clear()
    for key, value in items:
        unmirror_record(value)
        if key in PER_EYE_LISTS and isinstance(value, list) and len(value) == 2:
            value = value[::-1]
            if key in PER_EYE_VECTORS:
                value = [[0.0 - v[0], *v[1:]] if isinstance(v, list) and v else v for v in value]
        rec[_other_eye_key(key)] = value
    return rec


def interpupillary_distance_mm(points_px: np.ndarray) -> float:
    """Distance between the iris centres on the iris scale (11.7 mm iris), in mm.

    Valid for a face roughly parallel to the picture plane; used as a check
    of the metric scale.
    """
    m = frame_measurements(points_px)
    d_px = float(np.linalg.norm(m["iris_px"][0] - m["iris_px"][1]))
    return d_px * IRIS_DIAMETER_MM / float(np.mean(m["iris_diam_px"]))
