"""Index tables of MediaPipe's 478-point face mesh, in one place.

The face mesh numbers its points; these tables name the ones aspectus uses.
"Right" and "left" are the subject's own eyes (the right eye appears on the
picture's left in an unmirrored webcam picture). The eye outlines are closed
loops; :data:`RIGHT_EYE_OUTLINE` and :data:`LEFT_EYE_OUTLINE` run along the
upper lid first (the right eye's from its outer corner, the left eye's from
its inner corner) and back along the lower lid. :func:`eye_contour_lower_first` gives the same loop the other way
round (outer corner, 7 lower-lid points, inner corner, 7 upper-lid points),
the order the renderer moves the lids in. A test checks the loops against
the connection sets that MediaPipe itself ships.
"""
from __future__ import annotations

__all__ = ["N_LANDMARKS", "RIGHT_IRIS_CENTRE", "LEFT_IRIS_CENTRE", "RIGHT_IRIS_RING", "LEFT_IRIS_RING",
           "RIGHT_EYE_CORNERS", "LEFT_EYE_CORNERS", "RIGHT_EAR_POINTS", "LEFT_EAR_POINTS", "RIGHT_EYE_OUTLINE",
           "LEFT_EYE_OUTLINE", "FACE_OVAL", "EYES", "eye_contour_lower_first"]

#: points of the mesh with iris refinement
N_LANDMARKS = 478
#: iris centres
RIGHT_IRIS_CENTRE, LEFT_IRIS_CENTRE = 468, 473
#: the four iris rim points (temporal, up, nasal, down as MediaPipe gives them)
RIGHT_IRIS_RING = (469, 470, 471, 472)
LEFT_IRIS_RING = (474, 475, 476, 477)
#: outer and inner eye corners
RIGHT_EYE_CORNERS = (33, 133)
LEFT_EYE_CORNERS = (263, 362)
#: the six points of the eye aspect ratio, p1..p6 (Soukupova & Cech 2016)
RIGHT_EAR_POINTS = (33, 160, 158, 133, 153, 144)
LEFT_EAR_POINTS = (362, 385, 387, 263, 373, 380)
#: eye-opening loops: a corner, 7 upper-lid points, the other corner, 7 lower-lid points
RIGHT_EYE_OUTLINE = (33, 246, 161, 160, 159, 158, 157, 173, 133, 155, 154, 153, 145, 144, 163, 7)
LEFT_EYE_OUTLINE = (362, 398, 384, 385, 386, 387, 388, 466, 263, 249, 390, 373, 374, 380, 381, 382)
#: the face's outline
FACE_OVAL = (10, 338, 297, 332, 284, 251, 389, 356, 454, 323, 361, 288, 397, 365, 379, 378, 400, 377, 152,
             148, 176, 149, 150, 136, 172, 58, 132, 93, 234, 127, 162, 21, 54, 103, 67, 109)
#: eye keys: the subject's own right and left eye
EYES = ("right", "left")


def eye_contour_lower_first(eye: str) -> tuple[int, ...]:
    """The eye's loop from its outer corner along the lower lid first.

    Returns 16 indices: outer corner, 7 lower-lid points (outer to inner),
    inner corner, 7 upper-lid points (inner to outer).
    """
    if eye == "right":
        loop, outer = RIGHT_EYE_OUTLINE, RIGHT_EYE_CORNERS[0]
    elif eye == "left":
        loop, outer = LEFT_EYE_OUTLINE, LEFT_EYE_CORNERS[0]
    else:
        raise ValueError(f"eye must be 'right' or 'left', not {eye!r}")
    upper = set(loop[1:8])
    i = loop.index(outer)
    out = loop[i:] + loop[:i]
    if out[1] in upper:  # runs along the upper lid from here: turn it round
        out = (out[0],) + tuple(reversed(out[1:]))
    return out
