#!/usr/bin/python3
"""Reads generated series back with pydicom and checks them against the
DICOM rules and the brief, independently of gen.py's own arithmetic.

    /usr/bin/python3 check.py DIR...   (each DIR one series with truth.json)

Prints a JSON list, one report per folder. Geometry per PS3.3
C.7.6.2.1.1: the slice normal is the cross product of Image Orientation
(Patient)'s row and column cosines, a slice's position is Image Position
(Patient) dotted with it.
"""

import glob
import json
import os
import sys

import numpy as np
import pydicom


def check(d):
    t = json.load(open(os.path.join(d, "truth.json")))
    errs = []
    files = sorted(glob.glob(os.path.join(d, "*.dcm")))
    rep = {"dir": d, "files": 0, "errors": errs}
    pos, sops, imgs = [], [], []
    normal0 = None
    for f in files:
        ds = pydicom.dcmread(f)  # raises on a file that is not Part 10
        rep["files"] += 1
        name = os.path.basename(f)

        def need(ok, what):
            if not ok:
                errs.append(f"{name}: {what}")

        need(ds.file_meta.TransferSyntaxUID == "1.2.840.10008.1.2.1", "not Explicit VR Little Endian")
        need(ds.SOPClassUID == "1.2.840.10008.5.1.4.1.1.4", "not MR Image Storage")
        need(ds.file_meta.MediaStorageSOPInstanceUID == ds.SOPInstanceUID, "meta SOP Instance UID differs")
        need(ds.Modality == "MR", "modality")
        need(float(ds.EchoTime) >= 80, f"TE {ds.EchoTime} < 80 ms")
        need(2500 <= float(ds.RepetitionTime) <= 4000, f"TR {ds.RepetitionTime}")
        need(ds.ScanningSequence == "SE", "scanning sequence")
        need(ds.MRAcquisitionType == "2D", "MR acquisition type")
        need("T2" in ds.SeriesDescription and "SAG" in ds.SeriesDescription, "series description")
        need(256 <= ds.Rows <= 512 and 256 <= ds.Columns <= 512, f"matrix {ds.Rows}x{ds.Columns}")
        fov = ds.Rows * float(ds.PixelSpacing[0])
        need(199.9 <= fov <= 280.1, f"FOV {fov:.1f} mm")
        th = float(ds.SliceThickness)
        need(1 <= th <= 4, f"slice thickness {th}")
        need(float(ds.SpacingBetweenSlices) >= th - 1e-6, "spacing below thickness")
        iop = np.array([float(x) for x in ds.ImageOrientationPatient])
        r, c = iop[:3], iop[3:]
        need(abs(np.linalg.norm(r) - 1) < 1e-4 and abs(np.linalg.norm(c) - 1) < 1e-4 and abs(r @ c) < 1e-4, "orientation not orthonormal")
        n = np.cross(r, c)
        need(abs(n[0]) > np.cos(np.radians(10)), "not sagittal within 10 degrees")
        if normal0 is None:
            normal0 = n
        need(np.allclose(n, normal0, atol=1e-5), "orientation differs within the series")
        pos.append(float(np.array([float(x) for x in ds.ImagePositionPatient]) @ normal0))
        sops.append(ds.SOPInstanceUID)
        a = ds.pixel_array
        need(a.shape == (ds.Rows, ds.Columns), "pixel data shape")
        imgs.append(a)
    need_n = 9 <= len(files) <= 31
    if not need_n:
        errs.append(f"{len(files)} slices, not 9 to 31")
    pos = np.array(pos)
    tp = dict(zip(t["sop_instance_uids"], t["slice_positions_mm"]))
    for s, p in zip(sops, pos):
        if s not in tp or abs(tp[s] - p) > 0.01:
            errs.append(f"{s}: pydicom position {p:.4f} mm, truth {tp.get(s)}")
    srt = np.sort(pos)
    steps = np.diff(srt)
    sp = float(pydicom.dcmread(files[0]).SpacingBetweenSlices)
    if len(steps) and np.max(np.abs(steps - sp)) > 0.01:
        errs.append(f"position steps {steps.min():.4f}..{steps.max():.4f} mm, Spacing Between Slices {sp}")
    plane = t["plane_position_mm"]
    k = int(np.argmin(np.abs(pos - plane)))
    rep["nearest"] = sops[k]
    rep["distance_mm"] = float(plane - pos[k])
    rep["in_slab"] = bool(srt[0] - sp / 2 <= plane <= srt[-1] + sp / 2)
    lower = [im[im.shape[0] // 2:].astype(float) for im in imgs]
    top = max(float(x.max()) for x in lower)
    counts = np.array([float((x >= 0.9 * top).sum()) for x in lower])
    rep["csf_centroid_mm"] = float((counts * pos).sum() / max(counts.sum(), 1))
    return rep


print(json.dumps([check(d) for d in sys.argv[1:]]))
