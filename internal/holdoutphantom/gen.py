#!/usr/bin/python3
"""Held-out sagittal T2 cervical spine phantom for midsag's midline picker.

Written apart from the project's Go phantoms and from the picker (see
doc.go): numpy renders an anatomy defined in the patient's own body frame,
pydicom writes single-frame MR Image Storage files, and the truth (the
slice nearest the cord centreline's plane) comes from the construction.

    /usr/bin/python3 gen.py --out DIR [--n N] [--seed S] [--first I]
                            [--scenario NAME] [--clean] [--workers W]
                            [--fixed YAW,ROLL,OFFSET_SLICES] [--slices K]

DIR/index.json lists the cases; DIR/<case>/truth.json holds each truth;
DIR/<case>/*.dcm the slices. Same seed and case number, same bytes.

Coordinates are DICOM patient coordinates (LPS, mm: +x left, +y
posterior, +z head; PS3.3 C.7.6.2.1.1) for a head-first supine patient.
The body frame (u lateral, v anterior-posterior, w along the neck) is the
patient frame turned by the head's yaw, roll and pitch.
"""

import argparse
import hashlib
import json
import math
import os
import sys
from multiprocessing import Pool

import numpy as np
import pydicom
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import ExplicitVRLittleEndian

MR_IMAGE_STORAGE = "1.2.840.10008.5.1.4.1.1.4"  # PS3.4 B.5
SCENARIOS = ("centred", "offset", "lateral_only", "partial")
THICKNESSES = (1.0, 1.5, 2.0, 2.5, 3.0, 3.5, 4.0)

# T2-weighted turbo spin echo signal, relative to CSF. From memory (the
# usual order on fast spin echo T2: CSF > fat > healthy nucleus pulposus
# > cord ~ grey matter > marrow > muscle > ligament, cortex, air).
SIG = {
    "air": 0.0, "csf": 1.0, "fat": 0.72, "muscle": 0.22, "cord": 0.40,
    "marrow": 0.38, "cortex": 0.04, "nucleus": 0.78, "annulus": 0.14,
    "ligament": 0.05, "brain": 0.45, "vessel": 0.03, "root": 0.32,
    "mucosa": 0.55, "gland": 0.48,
}


def uid(*parts):
    """A deterministic UID under the 2.25 root (PS3.5 B.2: UUID-derived)."""
    h = hashlib.sha256("|".join(str(p) for p in parts).encode()).digest()
    return "2.25." + str(int.from_bytes(h[:16], "big"))


def rot(yaw, roll, pitch):
    """Body axes (columns u, v, w) in patient coordinates: yaw about the
    head-foot axis, roll about the anterior-posterior axis, pitch
    (flexion) about the left-right axis, angles in degrees."""
    y, r, p = (math.radians(a) for a in (yaw, roll, pitch))
    rz = np.array([[math.cos(y), -math.sin(y), 0], [math.sin(y), math.cos(y), 0], [0, 0, 1]])
    ry = np.array([[math.cos(r), 0, math.sin(r)], [0, 1, 0], [-math.sin(r), 0, math.cos(r)]])
    rx = np.array([[1, 0, 0], [0, math.cos(p), -math.sin(p)], [0, math.sin(p), math.cos(p)]])
    return rz @ ry @ rx


class Anatomy:
    """A cervical spine in the body frame, w = 0 at the C4/C5 disc.

    Sizes are adult values from memory (radiology teaching values, no
    single source): vertebral body C3-C7 about 14 mm high, 15-17 mm deep and
    17-22 mm wide; discs 4-6 mm; dural sac about 15-19 mm transverse and
    12-14 mm anterior-posterior at mid-cervical levels; cord about 10 mm
    transverse (up to 13 mm in the cervical enlargement, C4-C6) and 7 mm
    anterior-posterior; spinous processes 15-30 mm long, bifid at C3-C6,
    longest at C7; neck about 110-130 mm across and deep.
    """

    def __init__(self, rng):
        g = rng.uniform
        self.body_h = g(12.5, 15.0)
        self.disc_h = g(4.0, 6.0)
        self.body_d = g(15.0, 17.5) / 2  # semi-depth
        self.body_w = g(8.5, 11.0)  # semi-width
        self.sac_t = g(7.0, 9.5)  # dural sac semi-axes (14-19 mm across)
        self.sac_a = g(6.0, 7.2)
        self.cord_t = g(4.6, 5.4)  # cord semi-axes (~10 mm x 7 mm)
        self.cord_a = g(3.2, 3.8)
        self.enlarge = g(0.5, 1.4)  # extra semi-width at C5-C6
        self.lordosis = g(0.0, 9.0)  # mm of anterior bow over the neck
        self.lat_curve = g(-1.2, 1.2)  # mm of lateral bow of the canal
        self.neck_t = g(52.0, 64.0)
        self.neck_a = g(54.0, 64.0)
        self.neck_c = g(-4.0, 4.0)  # neck centre relative to the canal, anterior
        self.fat_t = g(4.0, 11.0)
        self.spine_len = g(16.0, 26.0)
        self.degen = [rng.random() < 0.3 for _ in range(12)]
        # Compressed levels: one or two discs among C3/4 .. C6/7.
        k = 1 + (rng.random() < 0.45)
        self.compressed = sorted(rng.choice([1, 0, -1, -2], size=k, replace=False).tolist())
        self.severity = [g(0.25, 0.6) for _ in range(k)]
        # Disc centres: index 0 is C4/C5 at w = 0, positive upwards.
        self.step = self.body_h + self.disc_h
        self.top = self.disc_w(3) + 4  # foramen magnum, about C1's level

    def disc_w(self, k):
        """w of disc k (0 = C4/5, 1 = C3/4, 2 = C2/3, -1 = C5/6, ...)."""
        return k * self.step

    def canal_centre(self, w):
        """(u, v) of the canal's centre at w: a lordotic bow, anterior at
        mid-neck (v negative is anterior), and a slight lateral bow."""
        t = np.clip(w / 70.0, -1.6, 1.6)
        v = -self.lordosis * (1 - t * t)
        u = self.lat_curve * np.cos(np.clip(w / 60.0, -1.6, 1.6) * math.pi / 2)
        return u, v

    def compression(self, w):
        """How far (0..1) the canal is narrowed from the front at w."""
        c = np.zeros_like(w)
        for k, s in zip(self.compressed, self.severity):
            c = np.maximum(c, s * np.exp(-((w - self.disc_w(k)) / 4.5) ** 2))
        return c

    def cord_points(self):
        """Cord centreline at mid-cervical levels (C3 to C6 bodies), in the
        body frame: the points whose mean plane is the truth."""
        w = np.linspace(self.disc_w(1.5), self.disc_w(-1.5), 25)
        u, v = self.canal_centre(w)
        v = v + self.compression(w) * self.sac_a * 0.5
        return np.stack([u, v, w], axis=-1)

    def render(self, u, v, w):
        """Signal at body-frame points (arrays of one shape)."""
        S = SIG
        uc, vc = self.canal_centre(w)
        b = u - uc  # lateral from the canal's centre
        a = v - vc  # posterior (+) / anterior (-) from the canal's centre
        ab = np.abs(b)
        img = np.full(u.shape, S["air"], np.float32)
        top = self.top

        # Neck: an elliptic cylinder; head: an ellipsoid above it, its
        # centre behind and above the foramen magnum.
        ca = a + self.neck_c
        neck = ((b / self.neck_t) ** 2 + (ca / self.neck_a) ** 2 < 1) & (w < top + 25)
        ft = self.fat_t
        deep = neck & ((b / (self.neck_t - ft)) ** 2 + (ca / (self.neck_a - ft)) ** 2 < 1)
        img[neck] = S["fat"]
        img[deep] = S["muscle"]
        inside = neck.copy()
        hi = np.nonzero(w > top - 40)  # the head only where it can be
        if hi[0].size:
            inside[hi], img[hi] = self.head(b[hi], a[hi], w[hi], img[hi], inside[hi])

        # Posterior muscles in bundles with fat planes between them (a
        # midline ligamentum nuchae, semispinalis/splenius planes).
        pi = np.nonzero(deep & (a > self.sac_a + 4) & (w < top))
        pa, pb = a[pi], ab[pi]
        plane = (np.abs(pb - (14 + 0.25 * (pa - 20))) < 1.2) | (np.abs(pa - (self.sac_a + 28 + 0.2 * pb)) < 1.0)
        sub = img[pi]
        sub[plane] = S["fat"]
        sub[(pb < 1.0) & (pa > self.sac_a + 4 + 0.6 * self.spine_len)] = S["ligament"]  # ligamentum nuchae
        img[pi] = sub

        # Prevertebral: longus colli, the airway with mucosa, the thyroid.
        front = -(self.sac_a + 1.5 + 2 * self.body_d)
        fi = np.nonzero(deep & (a < front))
        if fi[0].size:
            img[fi] = self.front(ab[fi], a[fi], w[fi], img[fi], front)

        # The spine, drawn only in its box: most of a slice is outside it.
        box = np.nonzero(inside & (ab < 36) & (a > -52) & (a < 62) & (w < top + 45))
        if box[0].size:
            img[box] = self.spine(b[box], a[box], w[box], img[box])
        return img

    def front(self, ab, a, w, img, front):
        """Soft tissue in front of the vertebral bodies."""
        S = SIG
        img[(a > front - 6) & (ab < 14)] = S["muscle"]
        air_a = front - 10 - np.clip((self.disc_w(-1) - w) * 0.12, 0, 8)
        airway = (np.abs(a - air_a) < 6) & (ab < 10) & (w < self.top + 10)
        img[airway & (np.abs(a - air_a) > 4.5)] = S["mucosa"]
        img[airway & (np.abs(a - air_a) <= 4.5) & (ab < 8)] = S["air"]
        img[(w < self.disc_w(-2)) & (a < air_a - 7) & (a > air_a - 20) & (ab > 4) & (ab < 22)] = S["gland"]
        return img

    def head(self, b, a, w, img, inside):
        """The head above the neck: an ellipsoid behind and above the
        foramen magnum with scalp, skull, CSF and brain, and the face in
        front; returns the outline and the signal at the points."""
        S = SIG
        top = self.top
        hq = (b / 72) ** 2 + ((a - 12) / 86) ** 2 + ((w - top - 62) / 80) ** 2
        inside = inside | (hq < 1)
        img = np.where((hq < 1) & (img == S["air"]), S["fat"], img).astype(np.float32)
        # Skull: scalp fat, a bone shell (cortex, marrow, cortex), a thin
        # CSF rim and brain.
        img[hq < (1 - 5 / 78) ** 2] = S["cortex"]
        img[hq < (1 - 7.5 / 78) ** 2] = S["marrow"]
        img[hq < (1 - 10 / 78) ** 2] = S["cortex"]
        img[hq < (1 - 11 / 78) ** 2] = S["csf"]
        brain = hq < (1 - 13.5 / 78) ** 2
        img[brain] = S["brain"]
        # Cerebellum behind the brainstem, with a few fissures; the
        # tentorium above it.
        cer = brain & (a > 8) & (w < top + 50)
        img[cer] = S["brain"] * 0.9
        img[cer & (np.abs(np.sin((np.hypot(a - 8, w - top - 18)) / 2.6)) < 0.12)] = S["csf"] * 0.8
        img[brain & (np.abs(w - top - 52 + 0.2 * a) < 1.0) & (a > 0)] = S["cortex"]
        # Face below the skull: tongue and jaw muscle in front.
        face = inside & ~brain & (w > top - 35) & (w < top + 20) & (a < -35) & (hq > 0.6)
        img[face] = S["muscle"] * 1.2
        return inside, img

    def spine(self, b, a, w, img):
        """The vertebral column and the canal at points b (lateral), a
        (anterior-posterior) from the canal's centre and w, painted over img."""
        S = SIG
        ab = np.abs(b)
        top = self.top
        head = w > top
        # Vertebrae: bodies between discs, C2 taller with its dens.
        ctr = a + self.sac_a + 1.5 + self.body_d  # 0 at the body's centre
        body_xs = (b / self.body_w) ** 2 + (ctr / self.body_d) ** 2
        in_body_xs = body_xs < 1
        kf = w / self.step
        kn = np.round(kf)  # nearest disc
        dw = w - kn * self.step  # along the neck from the nearest disc
        in_disc_band = np.abs(dw) < self.disc_h / 2
        lowest = self.disc_w(-4) - self.body_h
        c2_top = self.disc_w(2) + self.disc_h / 2 + 12
        spine = (w > lowest - 40) & (w < c2_top)
        body = in_body_xs & spine & ~in_disc_band
        dens = ((b / 5) ** 2 + ((ctr - 1) / 5) ** 2 < 1) & (w >= c2_top) & (w < c2_top + 14)
        bone = body | dens
        cortex = bone & ((body_xs > 0.78) | (np.abs(dw) < self.disc_h / 2 + 0.9))
        img[bone] = S["marrow"]
        img[cortex] = S["cortex"]
        # C1 anterior arch in front of the dens.
        arch1 = ((np.abs(ctr + self.body_d + 3) < 3.5) & (np.abs(w - c2_top - 7) < 5) & (ab < 10))
        img[arch1] = S["marrow"]

        # Discs: annulus ring, nucleus bright unless degenerate.
        disc = in_body_xs & in_disc_band & spine & (w < self.disc_w(2) + 3)
        img[disc] = S["annulus"]
        nuc = disc & (body_xs < 0.45) & (np.abs(dw) < self.disc_h / 2 - 0.8)
        idx = np.clip(kn.astype(int) + 6, 0, 11)
        degen = np.array(self.degen)[idx]
        img[nuc] = np.where(degen[nuc], S["annulus"] * 2.2, S["nucleus"])

        # Compression: a disc-osteophyte bar behind compressed discs pushes
        # into the canal from the front and flattens the cord.
        comp = self.compression(w)
        sac_front = -self.sac_a + comp * self.sac_a * 1.1
        bar = (a > -self.sac_a - 1.5) & (a < sac_front) & (ab < self.sac_t + 1) & (comp > 0.05) & spine
        img[bar] = S["annulus"]

        # Pedicles, lateral masses, facets and the vertebral artery at the
        # level of each body; neural foramina (fat and a root) at the discs.
        lat = (ab > self.sac_t) & (ab < self.sac_t + 14) & spine & (w < c2_top)
        ped = lat & ~in_disc_band & (a > -self.sac_a - 2) & (a < self.sac_a + 2) & (ab < self.sac_t + 6)
        img[ped] = S["marrow"]
        foramen = lat & in_disc_band & (a > -self.sac_a) & (a < self.sac_a) & (ab < self.sac_t + 8)
        img[foramen] = S["fat"]
        root = foramen & ((a / 2.2) ** 2 + ((dw) / 1.6) ** 2 < 1)
        img[root] = S["root"]
        mass = lat & (a >= self.sac_a - 2) & (a < self.sac_a + 12) & (ab > self.sac_t + 2)
        img[mass] = S["marrow"]
        facet = mass & (np.abs(dw - 2.5) < 0.7)
        img[facet] = S["ligament"]
        va = ((ab - (self.sac_t + 8)) / 2.5) ** 2 + ((a + self.sac_a + 4) / 2.5) ** 2 < 1
        img[va & (w < c2_top + 10) & (w > lowest)] = S["vessel"]

        # Laminae behind the canal and the spinous processes: midline,
        # sloping downwards.
        level = np.floor(kf)  # the body above disc kn lies between kn and kn+1
        bw = w - (level + 0.5) * self.step  # from the body's centre
        lam_a = a - self.sac_a
        lamina = spine & (lam_a > 0.5) & (lam_a < 4.5) & (ab < self.sac_t + 4) & (np.abs(bw + 0.15 * lam_a) < self.body_h * 0.42)
        img[lamina] = S["cortex"]
        lam_in = lamina & (lam_a > 1.5) & (lam_a < 3.5) & (ab < self.sac_t + 2)
        img[lam_in] = S["marrow"]
        lf = spine & (lam_a > 0.3) & (lam_a < 3.0) & (ab < self.sac_t) & ~lamina
        img[lf] = S["ligament"]  # ligamentum flavum between laminae
        sp_a = lam_a - 3.5
        sel = spine & (sp_a > 0) & (sp_a < self.spine_len + 12) & (ab < 5)
        # One process per body L (0 = C4, 1 = C3, 2 = C2, -3 = C7): C2's
        # is large, C7's and T1's longest, C2 to C6 bifid at the tip.
        extra = {2: 4, 1: -3, -3: 10, -4: 8}
        for L in range(-5, 3):
            length = self.spine_len + extra.get(L, 0)
            along = sp_a / length
            sp_w = w - (L + 0.5) * self.step + 0.45 * sp_a  # slopes down behind
            near = sel & (along < 1) & (np.abs(sp_w) < 3.6 - 1.2 * along)
            if not near.any():
                continue
            split = -2 <= L <= 2
            tip = along > 0.72
            bifid = tip & split & (np.abs(ab - 3.0) < 1.6)
            stem = ~(tip & split) & (ab < 2.6 - 0.8 * along)
            proc = near & (stem | bifid)
            img[proc] = S["marrow"]
            img[proc & ((np.abs(sp_w) > 2.6 - 1.2 * along) | (stem & (ab > 1.8 - 0.8 * along)))] = S["cortex"]

        # Canal: dural sac with CSF, cord inside; continuous with the
        # medulla and cisterna magna above the foramen magnum.
        sac_t = self.sac_t + np.where(head, 6, 0)
        sac_back = self.sac_a + np.where(head, 10, 0)
        ap = np.where(a < 0, a / np.maximum(self.sac_a - comp * self.sac_a * 1.1, 0.5), a / sac_back)
        sac = ((b / sac_t) ** 2 + ap ** 2 < 1) & (w < top + 30)
        img[sac] = S["csf"]
        cw = self.cord_t * (1 + 0.35 * comp) + self.enlarge * np.exp(-((w - self.disc_w(-0.5)) / 14) ** 2)
        ca_ = self.cord_a * (1 - 0.75 * comp)
        med = np.where(head, np.clip((w - top) / 25, 0, 1), 0)
        cw = cw + 4 * med
        ca_ = ca_ + 3 * med
        cord_v = comp * self.sac_a * 0.5  # pushed backwards when compressed
        cord = (b / cw) ** 2 + ((a - cord_v) / ca_) ** 2 < 1
        img[cord & (w < top + 40)] = S["cord"]
        # Central canal and grey matter faintly brighter in the middle.
        img[cord & ((b / (cw * 0.35)) ** 2 + ((a - cord_v) / (ca_ * 0.5)) ** 2 < 1) & (w < top)] = S["cord"] * 1.12
        return img


def plan(seed, i, scenario=None, fixed=None, slices=0):
    """Draw one series' acquisition and pose."""
    rng = np.random.default_rng(int.from_bytes(hashlib.sha256(f"{seed}/{i}".encode()).digest()[:8], "big"))
    p = {"case": i, "seed": seed}
    p["scenario"] = scenario or SCENARIOS[i % len(SCENARIOS)]
    p["thickness"] = THICKNESSES[(i // len(SCENARIOS)) % len(THICKNESSES)]
    # Gap 0-20% of the thickness, common practice for 2D sagittal spine.
    p["spacing"] = round(p["thickness"] * (1 + rng.choice([0, 0, 0.1, 0.2])), 3)
    p["slices"] = int(rng.integers(9, 32))
    while p["slices"] * p["spacing"] > 80 and p["slices"] > 9:
        p["slices"] -= 2
    if slices:
        p["slices"] = slices
    p["matrix"] = int(rng.choice([256, 320, 384, 448, 512]))
    p["fov"] = float(rng.uniform(200, 280))
    p["yaw"], p["roll"], p["pitch"] = (float(x) for x in (rng.uniform(-4, 4), rng.uniform(-4, 4), rng.uniform(-8, 8)))
    p["slab_tilt"] = [float(x) for x in rng.uniform(-1.5, 1.5, size=2)]  # planner's own obliquity
    n, sp = p["slices"], p["spacing"]
    half = (n - 1) / 2
    sc = p["scenario"]
    # Offset of the truth plane from the slab's centre, in slices.
    if sc == "centred":
        off = rng.uniform(-0.5, 0.5)
    elif sc == "offset":
        off = rng.choice([-1, 1]) * rng.uniform(1.0, 4.0)
    elif sc == "lateral_only":
        # Beyond an edge slice by 0.75 spacing up to 12 mm more.
        off = rng.choice([-1, 1]) * (half + 0.75 + rng.uniform(0, 12.0 / sp))
    else:  # partial: near or past an edge, inside or out
        off = rng.choice([-1, 1]) * (half + rng.uniform(-1.5, 1.5))
    if fixed is not None:
        p["yaw"], p["roll"], off = fixed
        p["pitch"], p["slab_tilt"] = 0.0, [0.0, 0.0]
    p["offset_slices"] = float(off)
    p["reverse"] = bool(rng.random() < 0.5)  # instance order right-to-left or left-to-right
    p["snr"] = float(rng.uniform(18, 35) * math.sqrt(p["thickness"] / 3))
    p["bias"] = [float(x) for x in rng.uniform(-0.18, 0.18, size=6)]
    p["scale"] = float(rng.uniform(1200, 3000))
    p["te"] = float(rng.choice([90, 100, 110, 120]))
    p["tr"] = float(rng.uniform(2500, 4000))
    p["field"] = float(rng.choice([1.5, 3.0]))
    p["fov_shift"] = [float(x) for x in rng.uniform(-15, 15, size=2)]
    p["rng"] = rng
    return p


def series(p, out, clean=False):
    """Render and write one series; return its truth."""
    rng = p.pop("rng")
    anat = Anatomy(rng)
    R = rot(p["yaw"], p["roll"], p["pitch"])
    # The cord's mid-cervical plane with the body origin at the patient
    # origin, along the slab's normal.
    t1, t2 = (math.radians(x) for x in p["slab_tilt"])
    # Slab orientation: rows anterior-to-posterior, columns head-to-foot
    # (the usual sagittal Image Orientation (Patient) 0\1\0\0\0\-1), turned
    # slightly by the planner.
    row = np.array([math.sin(t1), math.cos(t1), 0.0])
    col = np.array([math.sin(t2), 0.0, -math.cos(t2)])
    col -= row * (row @ col)
    col /= np.linalg.norm(col)
    normal = np.cross(row, col)  # PS3.3 C.7.6.2.1.1
    pts = anat.cord_points() @ R.T  # body to patient, origin 0
    s_cord = float(np.mean(pts @ normal))
    n, sp = p["slices"], p["spacing"]
    # Slice i centre along the normal: slab centre c, truth plane at
    # s_cord = c + offset*spacing.
    c = s_cord - p["offset_slices"] * sp
    pos = c + (np.arange(n) - (n - 1) / 2) * sp
    m, fov = p["matrix"], p["fov"]
    ps = fov / m
    # Image centre: the canal at mid-neck, shifted by the planner.
    centre_body = np.array([0.0, 10.0 + p["fov_shift"][0], -10.0 + p["fov_shift"][1]])
    centre = R @ centre_body
    centre = centre - normal * (centre @ normal)
    # Rendered at up to 256 pixels across and interpolated to the matrix,
    # as scanners zero-fill a coarser acquisition (common practice).
    r = min(m, 256)
    pr = fov / r
    rr, cc = np.meshgrid(np.arange(r), np.arange(r), indexing="ij")
    # Pixel (r, c) at IPP + c*ps*row + r*ps*col (PS3.3 C.7.6.2.1.1); both
    # grids share the FOV's centre.
    off_r = (cc - (r - 1) / 2) * pr
    off_c = (rr - (r - 1) / 2) * pr
    plane_pts = (centre[None, None, :] + off_r[..., None] * row + off_c[..., None] * col).astype(np.float32)
    nsub = 2 if p["thickness"] <= 2 else 3 if p["thickness"] < 4 else 4
    sub = (np.arange(nsub) + 0.5) / nsub - 0.5  # across the slice thickness
    order = list(range(n))
    if p["reverse"]:
        order.reverse()
    study_uid = uid(p["seed"], p["case"], "study")
    series_uid = uid(p["seed"], p["case"], "series")
    frame_uid = uid(p["seed"], p["case"], "frame")
    os.makedirs(out, exist_ok=True)
    sops, slice_pos = [], []
    sigma = 1.0 / p["snr"]
    for inst, i in enumerate(order, start=1):
        acc = np.zeros((r, r), np.float32)
        for f in sub:
            P = plane_pts + (normal * (pos[i] + f * p["thickness"])).astype(np.float32)
            B = P @ R.astype(np.float32)  # patient to body (R orthonormal)
            acc += anat.render(B[..., 0], B[..., 1], B[..., 2])
        img = acc / nsub
        if not clean:
            P = plane_pts + normal * pos[i]
            x = np.clip(P[..., 0] / 60, -1.5, 1.5)
            y = (P[..., 1] - centre[1]) / (fov / 2)
            z = (P[..., 2] - centre[2]) / (fov / 2)
            b = p["bias"]
            # Smooth receive-coil bias: stronger posteriorly (neck coil),
            # low order in-plane and across the slab (common practice for
            # bias-field simulation: a smooth multiplicative field).
            bias = np.exp(b[0] * y + b[1] * z + b[2] * x + b[3] * y * z + b[4] * y * y + b[5] * x * x - 0.25 * y)
            img = img * bias
            # Rician magnitude noise: |signal + complex Gaussian| (from memory,
            # the standard model of magnitude MR noise).
            n1 = rng.normal(0, sigma, img.shape)
            n2 = rng.normal(0, sigma, img.shape)
            img = np.sqrt((img + n1) ** 2 + n2 ** 2)
        img = resize(img, m)
        px = np.clip(np.round(img * p["scale"]), 0, 4095).astype(np.uint16)
        ipp = centre + normal * pos[i] - (m - 1) / 2 * ps * row - (m - 1) / 2 * ps * col
        sop = uid(p["seed"], p["case"], "sop", inst)
        write(os.path.join(out, f"IM{inst:04d}.dcm"), p, px, ipp, row, col, ps, sop, study_uid, series_uid, frame_uid, inst, n)
        sops.append(sop)
        slice_pos.append(float(ipp @ normal))
    sp_arr = np.array(slice_pos)
    k = int(np.argmin(np.abs(sp_arr - s_cord)))
    lo, hi = sp_arr.min(), sp_arr.max()
    truth = {
        "case": p["case"], "seed": p["seed"], "scenario": p["scenario"],
        "study_instance_uid": study_uid, "series_instance_uid": series_uid,
        "midline_sop_instance_uid": sops[k],
        "signed_distance_mm": s_cord - slice_pos[k],
        "in_slab": bool(lo - sp / 2 <= s_cord <= hi + sp / 2),
        "plane_position_mm": s_cord,
        "slice_normal": normal.tolist(),
        "sop_instance_uids": sops, "slice_positions_mm": slice_pos,
        "thickness_mm": p["thickness"], "spacing_mm": sp, "slices": n,
        "matrix": m, "fov_mm": fov, "pixel_spacing_mm": ps,
        "yaw_deg": p["yaw"], "roll_deg": p["roll"], "pitch_deg": p["pitch"],
        "offset_slices": p["offset_slices"],
        "compressed_discs": [{1: "C3/4", 0: "C4/5", -1: "C5/6", -2: "C6/7"}[k_] for k_ in anat.compressed],
        "canal_transverse_mm": 2 * anat.sac_t, "cord_transverse_mm": 2 * anat.cord_t,
        "cord_ap_mm": 2 * anat.cord_a,
    }
    tmp = os.path.join(out, "truth.json.tmp")
    with open(tmp, "w") as f:
        json.dump(truth, f, indent=1)
    os.replace(tmp, os.path.join(out, "truth.json"))
    return truth


def resize(img, m):
    """Bilinear resampling of a square image to m x m pixels with the same
    field of view (pixel centres at (j + 0.5) * size / m)."""
    r = img.shape[0]
    if r == m:
        return img
    x = np.clip((np.arange(m) + 0.5) * r / m - 0.5, 0, r - 1)
    i0 = np.minimum(np.floor(x).astype(int), r - 2)
    f = (x - i0).astype(np.float32)
    t = img[i0] * (1 - f)[:, None] + img[i0 + 1] * f[:, None]
    return t[:, i0] * (1 - f)[None, :] + t[:, i0 + 1] * f[None, :]


def write(path, p, px, ipp, row, col, ps, sop, study, series_uid, frame, inst, n):
    """One MR Image Storage file (PS3.3 A.4: MR Image IOD)."""
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = MR_IMAGE_STORAGE
    meta.MediaStorageSOPInstanceUID = sop
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    meta.ImplementationClassUID = uid("midsag holdout phantom implementation")
    meta.ImplementationVersionName = "MIDSAG_HOLDOUT"
    ds = Dataset()
    ds.file_meta = meta
    ds.SpecificCharacterSet = "ISO_IR 100"
    ds.ImageType = ["ORIGINAL", "PRIMARY", "OTHER"]  # PS3.3 C.8.3.1.1.1
    ds.SOPClassUID = MR_IMAGE_STORAGE
    ds.SOPInstanceUID = sop
    ds.StudyDate = ds.SeriesDate = ds.ContentDate = ds.AcquisitionDate = "20260101"
    ds.StudyTime = ds.SeriesTime = ds.ContentTime = ds.AcquisitionTime = "120000"
    ds.AccessionNumber = ""
    ds.Modality = "MR"
    ds.Manufacturer = "midsag holdout phantom"
    ds.ReferringPhysicianName = ""
    ds.StudyDescription = "C-SPINE RESEARCH PHANTOM"
    ds.SeriesDescription = "SAG T2 TSE"
    ds.PatientName = "HOLDOUT^PHANTOM"
    ds.PatientID = f"HOLDOUT{p['case']:05d}"
    ds.PatientBirthDate = ""
    ds.PatientSex = "O"
    ds.BodyPartExamined = "CSPINE"
    ds.ScanningSequence = "SE"
    ds.SequenceVariant = "SK"
    ds.ScanOptions = ""
    ds.MRAcquisitionType = "2D"
    ds.SliceThickness = f"{p['thickness']:.3f}"
    ds.RepetitionTime = f"{p['tr']:.1f}"
    ds.EchoTime = f"{p['te']:.1f}"
    ds.EchoTrainLength = "16"
    ds.NumberOfAverages = "2"
    ds.ImagingFrequency = f"{42.577 * p['field']:.4f}"  # 1H gyromagnetic ratio, MHz/T
    ds.ImagedNucleus = "1H"
    ds.MagneticFieldStrength = f"{p['field']:.1f}"
    ds.SpacingBetweenSlices = f"{p['spacing']:.3f}"
    ds.FlipAngle = "150"
    ds.PatientPosition = "HFS"
    ds.StudyInstanceUID = study
    ds.SeriesInstanceUID = series_uid
    ds.StudyID = "1"
    ds.SeriesNumber = "3"
    ds.AcquisitionNumber = "1"
    ds.InstanceNumber = str(inst)
    ds.ImagePositionPatient = [f"{x:.4f}" for x in ipp]
    ds.ImageOrientationPatient = [f"{x:.6f}" for x in (*row, *col)]
    ds.FrameOfReferenceUID = frame
    ds.PositionReferenceIndicator = ""
    ds.ImagesInAcquisition = str(n)
    ds.SliceLocation = f"{float(ipp @ np.cross(row, col)):.4f}"
    ds.SamplesPerPixel = 1
    ds.PhotometricInterpretation = "MONOCHROME2"
    ds.Rows, ds.Columns = px.shape
    ds.PixelSpacing = [f"{ps:.6f}", f"{ps:.6f}"]
    ds.BitsAllocated = 16
    ds.BitsStored = 12
    ds.HighBit = 11
    ds.PixelRepresentation = 0
    ds.WindowCenter = str(int(p["scale"] * 0.5))
    ds.WindowWidth = str(int(p["scale"] * 1.1))
    ds.PixelData = px.tobytes()
    tmp = path + ".tmp"
    # pydicom 2.x (Debian's python3-pydicom): the encoding is set on the
    # dataset; write_like_original=False writes the preamble and meta.
    ds.is_little_endian, ds.is_implicit_VR = True, False
    ds.save_as(tmp, write_like_original=False)
    os.replace(tmp, path)


def one(args):
    seed, i, out, scenario, clean, fixed, slices = args
    p = plan(seed, i, scenario, fixed, slices)
    return series(p, os.path.join(out, f"h{i:04d}"), clean)


def main(argv):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--out", required=True)
    ap.add_argument("--n", type=int, default=8)
    ap.add_argument("--first", type=int, default=0)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--scenario", choices=SCENARIOS)
    ap.add_argument("--clean", action="store_true", help="no noise and no bias field")
    ap.add_argument("--fixed", help="YAW,ROLL,OFFSET_SLICES: a pose set by hand (no pitch, no slab tilt)")
    ap.add_argument("--slices", type=int, default=0, help="slices per series (default: drawn, 9 to 31)")
    ap.add_argument("--workers", type=int, default=os.cpu_count() or 1)
    a = ap.parse_args(argv)
    fixed = tuple(float(x) for x in a.fixed.split(",")) if a.fixed else None
    jobs = [(a.seed, i, a.out, a.scenario, a.clean, fixed, a.slices) for i in range(a.first, a.first + a.n)]
    os.makedirs(a.out, exist_ok=True)
    if a.workers > 1 and len(jobs) > 1:
        with Pool(min(a.workers, len(jobs))) as pool:
            truths = pool.map(one, jobs, chunksize=1)
    else:
        truths = [one(j) for j in jobs]
    index = [{"dir": f"h{t['case']:04d}", "scenario": t["scenario"], "thickness_mm": t["thickness_mm"],
              "in_slab": t["in_slab"], "series_instance_uid": t["series_instance_uid"],
              "midline_sop_instance_uid": t["midline_sop_instance_uid"]} for t in truths]
    tmp = os.path.join(a.out, "index.json.tmp")
    with open(tmp, "w") as f:
        json.dump(index, f, indent=1)
    os.replace(tmp, os.path.join(a.out, "index.json"))


if __name__ == "__main__":
    main(sys.argv[1:])
