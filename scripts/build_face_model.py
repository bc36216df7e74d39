"""Build aspectus's 3-D face model (aspectus/data/face_model_mm.csv).

The model is the mean of the MediaPipe face-mesh landmarks of the two face
photographs that aspectus's dependencies ship (matplotlib's sample
``grace_hopper.jpg`` and scikit-image's ``astronaut``), put on a metric scale
by the horizontal iris diameter of 11.7 mm (Ruefer, Schroeder & Erb 2005,
Cornea 24(3) - from memory), aligned to each other by a similarity transform
(Umeyama 1991) and expressed in aspectus's head frame:

* origin midway between the two eyeball centres;
* x towards the subject's left (picture right when facing the camera),
  y down, z from the face into the head - the camera frame of
  aspectus.schema at zero head pose;
* eyeball centres 12 mm (Bekerman et al. 2014 - from memory) behind each
  photographed iris centre, assuming the photographed people look at the
  camera.

Run: python scripts/build_face_model.py
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from aspectus._env import import_cv2  # noqa: E402
from aspectus.geometry import umeyama  # noqa: E402

IRIS_MM = 11.7
EYEBALL_R_MM = 12.0


def photo_landmarks(img):
    from mediapipe.python.solutions import face_mesh

    with face_mesh.FaceMesh(static_image_mode=True, max_num_faces=1, refine_landmarks=True) as fm:
        res = fm.process(img)
    h, w = img.shape[:2]
    a = np.array([(p.x * w, p.y * h, p.z * w) for p in res.multi_face_landmarks[0].landmark])
    iris_px = 0.5 * (np.linalg.norm(a[469, :2] - a[471, :2]) + np.linalg.norm(a[474, :2] - a[476, :2]))
    return a * (IRIS_MM / iris_px)


def main():
    cv2 = import_cv2()
    import matplotlib.cbook as cbook
    from skimage import data

    hopper = cv2.cvtColor(cv2.imread(str(cbook.get_sample_data("grace_hopper.jpg", asfileobj=False))), cv2.COLOR_BGR2RGB)
    faces = [photo_landmarks(hopper), photo_landmarks(np.ascontiguousarray(data.astronaut()))]
    ref = faces[0]
    aligned = []
    for f in faces:
        s, R, t = umeyama(f, ref)
        aligned.append((s * (R @ f.T)).T + t)
    m = np.mean(aligned, axis=0)
    # eyeball centres 12 mm behind the iris centres (into the head = +z here)
    eye_r = m[468] + [0, 0, EYEBALL_R_MM]
    eye_l = m[473] + [0, 0, EYEBALL_R_MM]
    origin = 0.5 * (eye_r + eye_l)
    x = eye_l - eye_r
    x /= np.linalg.norm(x)
    down = m[152] - m[10]  # forehead to chin
    y = down - x * (down @ x)
    y /= np.linalg.norm(y)
    z = np.cross(x, y)
    R = np.stack([x, y, z])
    pts = (R @ (m - origin).T).T
    eyes = (R @ (np.stack([eye_r, eye_l]) - origin).T).T
    out = ROOT / "aspectus" / "data" / "face_model_mm.csv"
    rows = ["# aspectus head model, mm, head frame (x subject's left, y down, z into head); built by scripts/build_face_model.py",
            "index,x_mm,y_mm,z_mm"]
    rows += [f"{i},{p[0]:.4f},{p[1]:.4f},{p[2]:.4f}" for i, p in enumerate(pts)]
    rows += [f"eye_right,{eyes[0][0]:.4f},{eyes[0][1]:.4f},{eyes[0][2]:.4f}",
             f"eye_left,{eyes[1][0]:.4f},{eyes[1][1]:.4f},{eyes[1][2]:.4f}"]
    out.write_text("\n".join(rows) + "\n")
    print(f"wrote {out}; eyeball centre distance {np.linalg.norm(eyes[1] - eyes[0]):.1f} mm")


if __name__ == "__main__":
    main()
