"""The iris centre's height learnt from each clip's own eye appearance (``GazeParams(iris_combine="appearance")``).

At classroom scale (iris 8-12 px, H.264 at CRF 28) the limbus fit (:mod:`aspectus.webcam.limbus`) is unbiased
horizontally (error SD 0.15-0.3 px against the renderer's truth) but noisy vertically (0.4-1.3 px; one pixel
is about 6.7 deg of gaze at a 12 px iris): its few edge points on short arcs fix the centre's height weakly.
The whole eye region carries far more pixels that move with the eye - the iris, the sclera beside it and the
lids that follow vertical gaze. So:

1. In the per-frame geometry (:class:`EyePatchSampler`), each eye's region is sampled into a small patch
   (:data:`PATCH_SIZE`) in a frame that moves with the head and not with the eyes: a similarity transform
   placed by the eye anchors (the skin points below the eyes that :mod:`aspectus.webcam.eye_anchors` follows
   on the picture), scaled by the distance between the two eyes' anchors and turned with it (head roll),
   each patch centred on its eye's anchors plus an offset fixed at the first frame of a run.
2. Per clip, in blocks of :data:`BLOCK_FRAMES` frames (memory stays bounded on long clips), and per eye, a
   linear map from the patch's pixels - each patch normalised to zero mean and unit SD, so lighting's offset
   and gain do not enter - to the limbus fit's centre in patch coordinates is learnt
   (:func:`crossfit_predict`): the patches' principal components (from the block's open-eye patches; no
   label enters them), ridge regression on their scores, both chosen by the cross-fitted error against the labels.
   The limbus fits are the labels: their noise does not bias a regression, and the prediction averages many
   pixels. Each of 10 contiguous time folds is predicted by a model fitted on the other nine, so a frame's
   own label noise never enters its prediction; labels more than 3 robust SD from a first cross-fit, frames
   with closed eyes and failed fits are not used for fitting.
3. A regression predicts E[position | pixels], which follows the true position with a gain below one where
   the pixels explain it only in part (shrinkage). The gain is measured per eye with the *other* eye's limbus
   fit as an instrument (:func:`instrument_rescale`: the eyes move together vertically, and their fits' noise
   is independent) and divided out.
4. Per eye, the height taken is ``w * prediction + (1 - w) * limbus fit`` (the prediction alone where the fit
   failed), ``w`` in steps of 0.1 the one whose series correlates best with the *other* eye's limbus fit
   (:func:`blend_weights`; chosen in patch coordinates, applied in the picture, so that ``w = 0`` is the
   limbus fit itself): of two measures of the same motion, the one that agrees better with an
   independent third carries more signal, so each clip and eye falls back towards its limbus fit where the
   appearance is the noisier measure (large, sharp irises) and takes the appearance where the limbus fit is.
5. The result is mapped back to the picture through the same frame's transform; its height replaces the
   limbus fit's (the horizontal position stays the limbus fit's, which is already unbiased and steady).

Measured on twelve rendered dev clips (bench/bench_iris_appearance.py; docs/notes/gaze-measurement.md): RMS-S2S
down on eleven (by 21-55 %; +1 % on the twelfth), pitch r up on ten and within 0.002 on two, pitch gain nearer
one on seven and further on one - but the fixation kappa against the hand-coders down on five (by 0.01-0.13),
and at 25 px (point-sampled irises) no better than the limbus fit. Re-measured on area-drawn irises at 25-50 px
it lowered RMS-S2S on all 20 draws (docs/notes/gaze-measurement.md, "The appearance estimate on large faces"), and
since 2026-12-05 the default ``iris_combine="auto"`` takes it at every iris size (below 16.8 px of the limbus fit's
diameter before). Costs
(``time.process_time``): sampling 0.2-0.35 ms a frame at 640 x 480 (0.8-1.0 ms on 720p crops), the regression
0.15-0.5 ms a frame on 40-s clips; the patches (768 bytes a frame) wait in a temporary file, read back one
block at a time.
"""
from __future__ import annotations

import numpy as np

from aspectus._env import import_cv2
from aspectus.geometry import to_opencv_px
from aspectus.webcam.gaze import switch_iris_px

#: patch size (width, height) in samples, per eye
PATCH_SIZE = (24, 16)
#: the patch's width and height as fractions of the distance between the two eyes' anchor centroids (about
#: five iris diameters): some 2.9 x 1.9 iris diameters, the eye opening and a margin for the head's parallax
PATCH_SPAN = (0.56, 0.37)
#: bytes of one frame's patches (both eyes, uint8)
PATCH_BYTES = 2 * PATCH_SIZE[0] * PATCH_SIZE[1]
#: frames per block whose regression is fitted together (100 s at 30 fps; a block's normalised patches take
#: some 9 MB as float32)
BLOCK_FRAMES = 3000
#: fewer labelled frames than this in a block (per eye): no regression, the limbus fit stays
MIN_TRAIN_FRAMES = 150
#: cross-fitting folds, candidate numbers of components and ridge strengths (per cent of a component's variance)
FOLDS = 10
COMPONENTS = (4, 8, 16, 32)
RIDGE = (0.1, 1.0, 10.0, 100.0)
#: labels further than this many robust SD from a first cross-fit are left out of the fit
TRIM_SD = 3.0
#: the instrument's gain is kept within these limits before it is divided out: never above one, since a regression
#: on the labels shrinks (:func:`instrument_rescale`)
GAIN_LIMITS = (0.5, 1.0)
#: the appearance estimate's weights against the limbus fit that are tried (:func:`blend_with_labels`)
BLEND_WEIGHTS = tuple(round(0.1 * k, 1) for k in range(11))


#: with ``eye_anchor_set="auto"``: whether the face is small is settled first on this many first frames with a
#: face (5 s at 30 fps): :func:`small_iris`
DECIDE_FRAMES = 150


def small_iris(found: np.ndarray, mesh_diam_px: np.ndarray, limbus_diam_px: np.ndarray | None, ear: np.ndarray,
               below_px: float) -> tuple[bool, dict]:
    """(the iris is below ``below_px``, the size record) - the one rule by which ``eye_anchor_set="auto"`` decides
    whether the face is small, on the first frames (the per-frame geometry) and on the whole clip (the pipeline),
    on the clip's iris size as :func:`aspectus.webcam.gaze.switch_iris_px` reads it (the limbus fit's median over
    open-eye frames; the face mesh's with fewer than 30 fits)."""
    size = switch_iris_px(found, mesh_diam_px, limbus_diam_px, ear)
    return bool(np.isfinite(size["iris_px"]) and size["iris_px"] < below_px), size


class EyePatchSampler:
    """Samples both eyes' regions into fixed-size patches in a frame that moves with the head, not the eyes.

    The x axis runs from the right eye's anchor centroid to the left eye's, the scale is their distance (so
    head roll and distance do not move the patch's content); each eye's patch is centred on its anchor
    centroid plus an offset fixed, in that frame's units, at the first frame of a run from the face mesh's
    eye-corner midpoint. ``reset`` starts a new run (a new picture size).
    """

    def __init__(self, size=PATCH_SIZE, span=PATCH_SPAN):
        self.size = (int(size[0]), int(size[1]))
        self.span = (float(span[0]), float(span[1]))
        self.reset()

    def reset(self) -> None:
        self._offset: np.ndarray | None = None  # (2 eyes, 2) in units of the baseline, along the frame's axes

    def affines(self, anchors_px: np.ndarray, corners_px: np.ndarray) -> np.ndarray | None:
        """(2, 2, 3) maps from patch coordinates ``(u, v, 1)`` (sample centres at 0..W-1, 0..H-1) to picture
        px for the right and left eye, or None. ``anchors_px``: (6, 2), three below the right eye then three
        below the left; ``corners_px``: (2, 2, 2) eye corners [eye][outer, inner][x, y]."""
        a = np.asarray(anchors_px, float)
        if a.shape != (6, 2) or not np.isfinite(a).all():
            return None
        cents = np.stack([a[:3].mean(axis=0), a[3:].mean(axis=0)])
        d = cents[1] - cents[0]
        base = float(np.hypot(d[0], d[1]))
        if not base > 4.0:
            return None
        ex = d / base
        ey = np.array([-ex[1], ex[0]])
        if self._offset is None:
            mid = np.asarray(corners_px, float).mean(axis=1)
            if not np.isfinite(mid).all():
                return None
            rel = mid - cents
            self._offset = np.stack([rel @ ex, rel @ ey], axis=1) / base
        W, H = self.size
        sx, sy = self.span[0] * base / W, self.span[1] * base / H  # px per sample
        out = np.empty((2, 2, 3))
        for e in range(2):
            c = cents[e] + base * (self._offset[e, 0] * ex + self._offset[e, 1] * ey)
            out[e, :, 0] = sx * ex
            out[e, :, 1] = sy * ey
            out[e, :, 2] = c - (W - 1) / 2 * sx * ex - (H - 1) / 2 * sy * ey
        return out

    def sample(self, image: np.ndarray, origin_px, affines: np.ndarray) -> np.ndarray | None:
        """(2, H, W) uint8 patches of the picture crop ``image`` (grey or BGR) whose top-left pixel lies at
        ``origin_px`` in the picture, or None where a patch reaches outside the crop."""
        cv2 = import_cv2()
        W, H = self.size
        g = np.asarray(image)
        g = g.astype(np.float32).mean(axis=2) if g.ndim == 3 else g.astype(np.float32)
        h, w = g.shape
        out = np.empty((2, H, W), np.uint8)
        box = np.array([[0, W - 1, 0, W - 1], [0, 0, H - 1, H - 1], [1, 1, 1, 1]], float)
        for e in range(2):
            A = np.array(affines[e], float)
            # the affine gives picture positions (aspectus.schema's convention); warpAffine samples the crop
            # with its pixel i's centre at i: the crop's position, then OpenCV's, so a label mapped by
            # to_patch lies where its picture point lies in the patch
            A[:, 2] = to_opencv_px(A[:, 2] - np.asarray(origin_px, float))
            c = A @ box
            if not np.isfinite(c).all() or c.min() < 0 or c[0].max() > w - 1 or c[1].max() > h - 1:
                return None
            step = float(np.hypot(A[0, 0], A[1, 0]))
            src = cv2.GaussianBlur(g, (0, 0), 0.5 * step) if step > 1.5 else g  # coarser than the picture: no aliasing
            p = cv2.warpAffine(src, A, (W, H), flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
                               borderMode=cv2.BORDER_REPLICATE)
            out[e] = np.clip(np.rint(p), 0, 255).astype(np.uint8)
        return out


def to_patch(points_px: np.ndarray, affines: np.ndarray) -> np.ndarray:
    """Picture points (N, 2, 2) [frame][eye][x, y] in the patch coordinates of each frame's and eye's affine
    (N, 2, 2, 3); NaN where either is missing."""
    M = np.asarray(affines, float)[..., :2]
    good = np.isfinite(M).all(axis=(2, 3))
    det = M[..., 0, 0] * M[..., 1, 1] - M[..., 0, 1] * M[..., 1, 0]
    good &= np.abs(det) > 1e-12
    Ms = np.where(good[..., None, None], M, np.eye(2))
    inv = np.linalg.inv(Ms)
    d = np.asarray(points_px, float) - np.asarray(affines, float)[..., 2]
    out = np.einsum("neij,nej->nei", inv, d)
    out[~good] = np.nan
    return out


def to_picture(patch_xy: np.ndarray, affines: np.ndarray) -> np.ndarray:
    """Patch coordinates (N, 2, 2) back to picture px through each frame's affine (N, 2, 2, 3)."""
    A = np.asarray(affines, float)
    return np.einsum("neij,nej->nei", A[..., :2], patch_xy) + A[..., 2]


def normalise(patches: np.ndarray) -> np.ndarray:
    """(N, H, W) patches -> (N, H*W) float32, each with zero mean and unit SD (lighting's offset and gain out)."""
    X = np.asarray(patches).reshape(len(patches), -1).astype(np.float32)
    X -= X.mean(axis=1, keepdims=True)
    sd = X.std(axis=1, keepdims=True)
    return X / np.where(sd > 0, sd, 1.0)


def _crossfit(Z: np.ndarray, y: np.ndarray, train: np.ndarray, folds: int, components, ridge):
    """Cross-fitted ridge predictions on the leading score columns of ``Z``; (pred, (k, lambda), mse)."""
    n = len(Z)
    bounds = np.linspace(0, n, folds + 1).round().astype(int)
    preds = {(k, lam): np.full(y.shape, np.nan) for k in components for lam in ridge}
    for f in range(folds):
        a, b = bounds[f], bounds[f + 1]
        tr = train.copy()
        tr[a:b] = False
        if tr.sum() < max(components) + 10:
            continue
        ym = y[tr].mean(axis=0)
        for k in components:
            k_ = min(k, Z.shape[1])
            Zt = Z[tr, :k_]
            zm = Zt.mean(axis=0)
            Zt = Zt - zm
            Zp = Z[a:b, :k_] - zm
            G = Zt.T @ Zt
            r = Zt.T @ (y[tr] - ym)
            for lam in ridge:
                coef = np.linalg.solve(G + lam * len(Zt) / 100.0 * np.eye(k_), r)
                preds[(k, lam)][a:b] = Zp @ coef + ym
    best, err = None, np.inf
    for c, p in preds.items():
        ok = train & np.isfinite(p).all(axis=1)
        if ok.sum() < 10:
            continue
        e = float(np.mean((p[ok] - y[ok]) ** 2))
        if e < err:
            best, err = c, e
    return (preds[best] if best is not None else None), best, err


def crossfit_predict(X: np.ndarray, y: np.ndarray, train: np.ndarray, rows: np.ndarray | None = None, *,
                     folds: int = FOLDS, components=COMPONENTS, ridge=RIDGE,
                     trim: float = TRIM_SD) -> tuple[np.ndarray, dict]:
    """Cross-fitted predictions of ``y`` (N, d) from ``X`` (N, P): principal components + ridge regression.

    The components come from the ``rows`` of X (default all; they use no labels). The N frames are cut into
    ``folds`` contiguous time blocks; each block is predicted by a ridge regression on the component scores
    (scaled to unit variance) fitted on the ``train`` frames of the other blocks. The number of components
    and the ridge strength are those with the least cross-fitted squared error on the ``train`` labels;
    with ``trim`` > 0 labels further than ``trim`` robust SD from a first cross-fit are dropped and the fit
    run again. Returns the predictions (N, d) - NaN where nothing could be fitted - and a record.
    """
    X = np.asarray(X, np.float32)
    y = np.asarray(y, float)
    train = np.asarray(train, bool) & np.isfinite(y).all(axis=1)
    rows = np.ones(len(X), bool) if rows is None else np.asarray(rows, bool)
    nan = np.full(y.shape, np.nan)
    if rows.sum() < max(components) + 10 or train.sum() < max(components) + 10 + len(X) // max(folds, 1):
        return nan, {"fitted": False, "train_frames": int(train.sum())}
    yz = np.where(np.isfinite(y), y, 0.0)
    mu = X[rows].mean(axis=0)
    _, s, Vt = np.linalg.svd(X[rows] - mu, full_matrices=False)
    k = min(max(components), len(s))
    s_k = np.where(s[:k] > 0, s[:k], 1.0) / np.sqrt(rows.sum())
    Z = (X - mu) @ (Vt[:k].T / s_k)
    pred, best, err = _crossfit(Z, yz, train, folds, components, ridge)
    if pred is None:
        return nan, {"fitted": False, "train_frames": int(train.sum())}
    dropped = 0
    if trim > 0:
        res = np.abs(pred - yz).max(axis=1)
        ok = train & np.isfinite(res)
        mad = 1.4826 * float(np.median(res[ok]))
        out = ok & (res > trim * mad)
        if out.any() and (train & ~out).sum() >= max(components) + 10:
            dropped = int(out.sum())
            p2, b2, e2 = _crossfit(Z, yz, train & ~out, folds, components, ridge)
            if p2 is not None:
                pred, best, err = p2, b2, e2
    return pred, {"fitted": True, "components": int(best[0]), "ridge": float(best[1]),
                  "crossfit_rmse_px": round(float(np.sqrt(err)), 4), "train_frames": int(train.sum()),
                  "labels_dropped": dropped}


def instrument_rescale(est: np.ndarray, labels: np.ndarray, use: np.ndarray, *,
                       limits=GAIN_LIMITS) -> tuple[np.ndarray, dict]:
    """The estimates (N, 2 eyes, 2 axes) rescaled about their mean by their gain on the labels' scale,
    measured with the *other* eye's labels as the instrument.

    The two eyes move together (vertical vergence is small) and the limbus fit's noise in one eye is
    independent of the other's, so ``cov(est_R, label_L) / cov(label_R, label_L)`` is the share of the
    right eye's labelled motion that its estimate follows, free of the label noise that biases a plain
    regression of estimate on label (instrumental variables, Reiersol 1945 - from memory). The gain is kept
    within ``limits`` before dividing; where it cannot be measured the estimate is left as it is.

    The upper limit is one: the estimate is a regression on the labels, E[label | pixels], whose motion is at
    most the labels' own (the pixels explain all of it or shrink it), so under the instrument's assumptions
    its gain is at most one. A gain measured above one says that the assumptions fail - the eyes' label errors
    are not independent of each other, e.g. both fits read the iris's height with an error that depends on
    where the lids cross it, which moves with the gaze - and dividing by it would shrink the estimate below
    its labels' motion; the estimate is then left at its own scale. (On the gaze grid's 12 px CRF 28 cell the
    right eye's gain measured 1.24, and divided by it its vertical gain against the rendered truth was 0.69
    against 0.80 at its own scale; docs/notes/gaze-measurement.md, "Where the vertical gain is lost at 12 px".)
    """
    out = np.array(est, float).copy()
    gains: dict = {}
    for e in range(2):
        for ax in range(2):
            ok = (np.asarray(use, bool) & np.isfinite(labels[:, 0, ax]) & np.isfinite(labels[:, 1, ax])
                  & np.isfinite(out[:, e, ax]))
            if ok.sum() < 20:
                continue
            other = labels[ok, 1 - e, ax]
            den = float(np.cov(labels[ok, e, ax], other)[0, 1])
            if not den > 0:
                continue
            g = float(np.clip(np.cov(out[ok, e, ax], other)[0, 1] / den, *limits))
            m = float(np.mean(out[ok, e, ax]))
            out[:, e, ax] = m + (out[:, e, ax] - m) / g
            gains[f"{('right', 'left')[e]}_{'xy'[ax]}"] = round(g, 3)
    return out, gains


def appearance_iris(patches: np.ndarray, affines: np.ndarray, limbus_px: np.ndarray, usable: np.ndarray, *,
                    block_frames: int = BLOCK_FRAMES, min_train: int = MIN_TRAIN_FRAMES) -> tuple[np.ndarray, dict]:
    """Iris centres (N, 2, 2) in picture px predicted from the eye patches, NaN where there is no prediction.

    ``patches``: (N, 2, H, W) uint8 (:meth:`EyePatchSampler.sample`), or any sequence of N frames whose slice
    ``patches[a:b]`` gives that array for frames a-b (read one block at a time); ``affines``: (N, 2, 2, 3), NaN where a
    frame has no patch; ``limbus_px``: (N, 2, 2) the limbus fit, NaN where it failed; ``usable``: (N,) frames
    whose fits may be labels (face found, eyes open). Blocks of ``block_frames`` (a last block shorter than
    half of that joins the one before) are fitted separately; an eye with fewer than ``min_train`` labelled
    frames in a block gets no prediction there.
    """
    n = len(patches)
    out = np.full((n, 2, 2), np.nan)
    info: dict = {"blocks": []}
    if n == 0:
        return out, info
    affines = np.asarray(affines, float)
    have = np.isfinite(affines).all(axis=(2, 3))  # (N, 2)
    labels = to_patch(limbus_px, affines)
    edges = list(range(0, n, max(int(block_frames), 1))) + [n]
    if len(edges) > 2 and edges[-1] - edges[-2] < block_frames // 2:
        del edges[-2]
    for a, b in zip(edges[:-1], edges[1:]):
        est = np.full((b - a, 2, 2), np.nan)
        recs = []
        block = np.asarray(patches[a:b])  # one block at a time: the patches may be read from a file
        for e in range(2):
            rows = have[a:b, e]
            train = rows & np.asarray(usable[a:b], bool) & np.isfinite(labels[a:b, e]).all(axis=1)
            if train.sum() < min_train:
                recs.append({"fitted": False, "train_frames": int(train.sum())})
                continue
            X = normalise(block[:, e])
            # the components from the open eyes' patches: a blink's patch is an outlier that would take some
            pred, rec = crossfit_predict(X, labels[a:b, e], train, rows & np.asarray(usable[a:b], bool))
            pred[~rows] = np.nan
            est[:, e] = pred
            recs.append(rec)
        use = np.asarray(usable[a:b], bool)
        est, gains = instrument_rescale(est, labels[a:b], use)
        weights = blend_weights(est, labels[a:b], use, axis=1)  # chosen in the head's frame (patch coordinates)
        pic = to_picture(est, affines[a:b])
        for e, w in weights.items():  # applied in the picture, so that w = 0 gives the limbus fit itself
            lab = np.asarray(limbus_px[a:b, e, 1], float)
            pic[:, e, 1] = np.where(np.isfinite(lab), w * pic[:, e, 1] + (1.0 - w) * lab, pic[:, e, 1])
        out[a:b] = pic
        blend = {("right", "left")[e]: w for e, w in weights.items()}
        info["blocks"].append({"frames": [int(a), int(b)], "right": recs[0], "left": recs[1], "gain": gains,
                               "appearance_weight": blend})
    out[~have] = np.nan
    return out, info


def blend_weights(est: np.ndarray, labels: np.ndarray, use: np.ndarray, *, axis: int = 1,
                  weights=BLEND_WEIGHTS) -> dict:
    """Per eye (0 right, 1 left), the weight ``w`` of ``w * est + (1 - w) * label`` along ``axis`` whose series
    agrees best (Pearson r) with the *other* eye's labels; eyes without enough frames are left out.

    Both eyes see the same vertical gaze and their fits' errors are independent, so of two measures of one
    eye the one that correlates better with the other eye's measure carries the larger share of signal in
    its variance; the blend lets each clip and eye fall back to its limbus fit where the appearance estimate
    is the noisier (a large, sharp iris) and use it where the limbus fit is.
    """
    out: dict = {}
    for e in range(2):
        other = labels[:, 1 - e, axis]
        ok = np.asarray(use, bool) & np.isfinite(other) & np.isfinite(est[:, e, axis]) & np.isfinite(labels[:, e, axis])
        if ok.sum() < 20:
            continue
        best, best_r = 1.0, -np.inf
        for w in weights:
            c = w * est[ok, e, axis] + (1.0 - w) * labels[ok, e, axis]
            r = float(np.corrcoef(c, other[ok])[0, 1])
            if r > best_r:
                best, best_r = float(w), r
        out[e] = round(best, 2)
    return out


def blend_with_labels(est: np.ndarray, labels: np.ndarray, use: np.ndarray, *, axis: int = 1,
                      weights=BLEND_WEIGHTS) -> tuple[np.ndarray, dict]:
    """(N, 2, 2) estimates blended with the labels along ``axis`` by :func:`blend_weights` (the estimate where
    the label is missing), and the weights by eye name."""
    out = np.array(est, float).copy()
    w = blend_weights(est, labels, use, axis=axis, weights=weights)
    for e, we in w.items():
        lab = labels[:, e, axis]
        out[:, e, axis] = np.where(np.isfinite(lab), we * est[:, e, axis] + (1.0 - we) * lab, est[:, e, axis])
    return out, {("right", "left")[e]: we for e, we in w.items()}
