#!/usr/bin/python3
"""Write topostate's NIfTI-1 and NumPy (.npy) test fixtures with general-purpose
reference libraries -- Debian's python3-nibabel (5.0) and python3-numpy (1.24)
-- and the values those libraries read back from them.

Run once, from the repository root, when the fixtures must change:

    apt-get install -y python3-nibabel python3-numpy
    /usr/bin/python3 testdata/nifti/make_fixture.py

Every image and array is invented (seeded random numbers); nothing comes from
a scan. The Go tests compare topostate's readers with what nibabel and numpy
say about the same bytes:

  testdata/nifti/
    atlas.nii.gz, atlas_labels.tsv   3-D label atlas (labels 1..4, 0 = outside), label table
    bold_*.nii[.gz]                  4-D images in several datatypes, byte orders, units;
                                     bold_uint16_slope0.nii has scl_slope 0 (no scaling)
    expected_header.tsv              per image: dims, datatype, TR in seconds, best affine
    expected_means.tsv               per image, volume and label: mean of the scaled voxels
    atlas_shifted.nii.gz             same grid size, affine moved by 5 mm (grid mismatch)
    atlas_small.nii.gz               6x5x3 (grid mismatch)
    bold_complex64.nii               a datatype topostate refuses
    cohort/                          4 subjects' BOLD images + participants.tsv
    cohort_tsv/                      the same cohort as region-mean TSV tables (numpy's means)
  testdata/npy/
    c_f64.npy, fortran_f32.npy, be_f8.npy, expected_npy.tsv
    cohort/                          the cohort above as .npy arrays with RegionNames sidecars
"""

import json
import os
import shutil

import nibabel as nib
import numpy as np

ROOT = os.path.dirname(os.path.abspath(__file__))
NPY = os.path.join(os.path.dirname(ROOT), "npy")
GRID = (6, 5, 4)
rng = np.random.default_rng(20260507)

# Voxel-to-world affine with a rotation about z (10 degrees), a flip of x and
# 3 x 3 x 3.5 mm voxels: det < 0, so the qform needs qfac = -1.
th = np.deg2rad(10.0)
rot = np.array([[np.cos(th), -np.sin(th), 0], [np.sin(th), np.cos(th), 0], [0, 0, 1]])
AFFINE = np.eye(4)
AFFINE[:3, :3] = rot @ np.diag([-3.0, 3.0, 3.5])
AFFINE[:3, 3] = [40.0, -60.0, -20.0]


def atlas_labels():
    """Labels 1..4 in four blocks of the grid, a rim of zeros outside."""
    lab = np.zeros(GRID, dtype=np.int16)
    lab[1:3, 1:3, :2] = 1
    lab[3:5, 1:3, :2] = 2
    lab[1:3, 3:5, 2:] = 3
    lab[3:6, 2:5, 2:] = 4
    lab[0, 0, 0] = 3  # a lone voxel far from its block
    return lab


def save(img, path, qform=True, sform=True):
    img.set_qform(AFFINE if qform else None, code=1 if qform else 0)
    img.set_sform(AFFINE if sform else None, code=2 if sform else 0)
    nib.save(img, path)


def bold(data, dtype, tr, unit, endianness="<"):
    hdr = nib.Nifti1Header(endianness=endianness)
    img = nib.Nifti1Image(data, AFFINE, header=hdr)
    img.set_data_dtype(np.dtype(dtype).newbyteorder(endianness))
    img.header.set_xyzt_units("mm", unit)
    img.header.set_zooms(img.header.get_zooms()[:3] + (tr,))
    return img


UNIT_SECONDS = {"sec": 1.0, "msec": 1e-3, "usec": 1e-6}


def main():
    os.makedirs(ROOT, exist_ok=True)
    os.makedirs(NPY, exist_ok=True)
    lab = atlas_labels()
    atlas = nib.Nifti1Image(lab, AFFINE)
    atlas.set_data_dtype(np.int16)
    save(atlas, os.path.join(ROOT, "atlas.nii.gz"))
    names = ["deck_a", "deck_b", "hull_a", "hull_b"]
    with open(os.path.join(ROOT, "atlas_labels.tsv"), "w") as f:
        f.write("index\tname\n")
        for i, n in enumerate(names, 1):
            f.write(f"{i}\t{n}\n")

    shifted = nib.Nifti1Image(lab, AFFINE)
    moved = AFFINE.copy()
    moved[0, 3] += 5.0
    shifted.set_qform(moved, code=1)
    shifted.set_sform(moved, code=2)
    nib.save(shifted, os.path.join(ROOT, "atlas_shifted.nii.gz"))
    small = nib.Nifti1Image(lab[:, :, :3].copy(), AFFINE)
    save(small, os.path.join(ROOT, "atlas_small.nii.gz"))

    cplx = nib.Nifti1Image(np.ones(GRID + (2,), dtype=np.complex64), AFFINE)
    save(cplx, os.path.join(ROOT, "bold_complex64.nii"))

    # 4-D images: (name, dtype, TR, unit, byte order, qform, sform, volumes, value scale)
    cases = [
        ("bold_int16_scaled.nii", "i2", 2.0, "sec", "<", True, False, 12, 40.0),
        ("bold_float32.nii.gz", "f4", 1500.0, "msec", "<", False, True, 12, 40.0),
        ("bold_float64_be.nii", "f8", 800000.0, "usec", ">", True, True, 12, 40.0),
        ("bold_uint8.nii", "u1", 2.5, "sec", "<", True, True, 6, 40.0),
        ("bold_int8.nii", "i1", 2.5, "sec", "<", True, True, 4, 0.3),
        ("bold_int32.nii", "i4", 2.5, "sec", "<", True, True, 4, 40.0),
        ("bold_uint16.nii", "u2", 2.5, "sec", "<", True, True, 4, 40.0),
        ("bold_uint32.nii", "u4", 2.5, "sec", "<", True, True, 4, 40.0),
    ]
    hrows, mrows = [], []
    for name, dt, tr, unit, endian, qf, sf, nvol, scale in cases + [("bold_uint16_slope0.nii",) + cases[-2][1:]]:
        data = 900.0 + scale * rng.standard_normal(GRID + (nvol,))
        if dt == "i1":
            data -= 900.0
        if dt in ("i4", "u2", "u4"):
            data = np.round(data)  # stored as is (no scaling needed)
        img = bold(data, dt, tr, unit, endian)
        path = os.path.join(ROOT, name)
        save(img, path, qform=qf, sform=sf)
        if name == "bold_uint16_slope0.nii":
            # scl_slope 0 means "no scaling" (scl_inter then ignored); nibabel
            # would not write it, so the header bytes are patched here.
            with open(path, "r+b") as f:
                f.seek(112)
                f.write(np.array([0.0, 7.0], dtype="<f4").tobytes())
        back = nib.load(path)
        h = back.header
        vals = back.get_fdata()  # scaled by scl_slope / scl_inter, float64
        aff = h.get_best_affine()
        tr_s = float(h.get_zooms()[3]) * UNIT_SECONDS[h.get_xyzt_units()[1]]
        hrows.append([name, *map(str, back.shape), str(int(h["datatype"])), repr(tr_s)]
                     + [repr(float(v)) for v in aff[:3, :].ravel()])
        for v in range(nvol):
            for k in range(1, 5):
                mrows.append([name, str(v + 1), str(k), repr(float(vals[..., v][lab == k].mean()))])
    with open(os.path.join(ROOT, "expected_header.tsv"), "w") as f:
        f.write("file\tnx\tny\tnz\tnt\tdatatype\ttr_seconds\t" + "\t".join(f"a{i}{j}" for i in range(3) for j in range(4)) + "\n")
        for r in hrows:
            f.write("\t".join(r) + "\n")
    with open(os.path.join(ROOT, "expected_means.tsv"), "w") as f:
        f.write("file\tvolume\tlabel\tmean\n")
        for r in mrows:
            f.write("\t".join(r) + "\n")

    write_cohort(lab, names)
    write_npy()


def write_cohort(lab, names):
    """Four invented subjects whose regions switch between two correlation
    patterns in blocks, stored as int16 (nibabel's scaling) .nii.gz; the same
    region means as TSV tables and as .npy arrays."""
    coh = os.path.join(ROOT, "cohort")
    tsv = os.path.join(ROOT, "cohort_tsv")
    npc = os.path.join(NPY, "cohort")
    for d in (coh, tsv, npc):
        shutil.rmtree(d, ignore_errors=True)
        os.makedirs(d)
    T, tr = 48, 2.0
    subjects = ["sub-01", "sub-02", "sub-03", "sub-04"]
    groups = ["day", "night", "day", "night"]
    for d in (coh, tsv, npc):
        with open(os.path.join(d, "participants.tsv"), "w") as f:
            f.write("participant_id\tgroup\tage\n")
            for i, (s, g) in enumerate(zip(subjects, groups)):
                f.write(f"{s}\t{g}\t{31 + 3 * i}\n")
    for i, s in enumerate(subjects):
        sig = np.zeros((T, 4))
        for start in range(0, T, 8):
            a, b = rng.standard_normal(8), rng.standard_normal(8)
            if (start // 8 + i) % 2 == 0:
                sig[start:start + 8] = np.column_stack([a, a, b, b])
            else:
                sig[start:start + 8] = np.column_stack([a, b, a, b])
        data = 1000.0 + 2.0 * rng.standard_normal(GRID + (T,))
        for k in range(1, 5):
            data[lab == k] += 12.0 * sig[:, k - 1]
        img = bold(data, "i2", tr, "sec")
        d = os.path.join(coh, s, "func")
        os.makedirs(d)
        path = os.path.join(d, f"{s}_task-rest_bold.nii.gz")
        save(img, path)
        vals = nib.load(path).get_fdata()
        means = np.column_stack([vals[lab == k].mean(axis=0) for k in range(1, 5)])  # T x 4
        d = os.path.join(tsv, s, "func")
        os.makedirs(d)
        base = os.path.join(d, f"{s}_task-rest_timeseries")
        with open(base + ".tsv", "w") as f:
            f.write("\t".join(names) + "\n")
            for row in means:
                f.write("\t".join(repr(float(v)) for v in row) + "\n")
        with open(base + ".json", "w") as f:
            json.dump({"RepetitionTime": tr}, f)
            f.write("\n")
        d = os.path.join(npc, s, "func")
        os.makedirs(d)
        base = os.path.join(d, f"{s}_task-rest_timeseries")
        arr = np.asfortranarray(means) if i % 2 else np.ascontiguousarray(means)
        np.save(base + ".npy", arr)
        with open(base + ".json", "w") as f:
            json.dump({"RepetitionTime": tr, "RegionNames": names}, f)
            f.write("\n")


def write_npy():
    """Three small T x p arrays: C-order float64, Fortran-order float32 and
    big-endian float64; their values as numpy reads them back."""
    rows = []
    for name, dt, fortran in [("c_f64.npy", "<f8", False), ("fortran_f32.npy", "<f4", True), ("be_f8.npy", ">f8", False)]:
        a = (100.0 + rng.standard_normal((7, 3))).astype(dt)
        a = np.asfortranarray(a) if fortran else np.ascontiguousarray(a)
        path = os.path.join(NPY, name)
        np.save(path, a)
        back = np.load(path)
        assert back.flags["F_CONTIGUOUS"] == fortran or back.shape[1] == 1
        for t in range(back.shape[0]):
            for j in range(back.shape[1]):
                rows.append([name, str(t + 1), str(j + 1), repr(float(back[t, j]))])
    with open(os.path.join(NPY, "expected_npy.tsv"), "w") as f:
        f.write("file\tt\tcolumn\tvalue\n")
        for r in rows:
            f.write("\t".join(r) + "\n")


if __name__ == "__main__":
    main()
