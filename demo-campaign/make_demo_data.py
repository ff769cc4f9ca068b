"""Generate the invented demo data of demo-campaign/ (an invented clinic, invented machines).

The calculated dose is an invented analytic model written for this demo, not clinical data:
a 6 MV-like depth dose (linear build-up to 15 mm, then exponential fall-off) times
error-function field edges. Measured chamber readings are the model at the chamber points with
small invented deviations per machine, including one deliberate output error on lin-a.

Run from the repository root:  python3 demo-campaign/make_demo_data.py
Needs pydicom >= 3 and numpy. Output is deterministic. A Rust generator replaces this script
when the full demo arrives.
"""
import math
import pathlib

import numpy as np
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import ExplicitVRLittleEndian, generate_uid

HERE = pathlib.Path(__file__).parent
DATA = HERE / "data"
ISO = (10.0, -50.0, 25.0)  # isocentre in the dose grid's DICOM coordinates (mm), HFS phantom
D_ISO = 2.0  # Gy at the isocentre, 10 cm deep


def depth_factor(d_mm):
    build = min(d_mm / 15.0, 1.0) * 0.55 + 0.45 if d_mm < 15.0 else 1.0
    return build * math.exp(-0.0048 * max(d_mm - 15.0, 0.0))


def edge(u_mm, half_mm, sigma_mm=3.0):
    a = (half_mm - u_mm) / (math.sqrt(2) * sigma_mm)
    b = (half_mm + u_mm) / (math.sqrt(2) * sigma_mm)
    # Open-field shape with slight horns, plus a 3 % scatter tail outside the field.
    return 0.97 * 0.25 * (1 + math.erf(a)) * (1 + math.erf(b)) * (1 + 0.0004 * u_mm * u_mm / 10) + 0.03


def dose_iec(x, y, z, half=50.0):
    """Dose at IEC 61217 point (mm from isocentre); the beam enters from above (gantry 0)."""
    depth = 100.0 - z
    return D_ISO * depth_factor(depth) / depth_factor(100.0) * edge(x, half) * edge(y, half)


def write_rtdose(path):
    xs = np.arange(-80.0, 80.1, 4.0) + ISO[0]  # columns, patient x
    ys = np.arange(-100.0, 100.1, 5.0) + ISO[1]  # rows, patient y (posterior = deeper)
    zs = np.arange(-80.0, 80.1, 5.0) + ISO[2]  # frames, patient z
    dose = np.zeros((len(zs), len(ys), len(xs)))
    for k, pz in enumerate(zs):
        for j, py in enumerate(ys):
            for i, px in enumerate(xs):
                # HFS: IEC X = x, IEC Y = z, IEC Z = -y (relative to the isocentre).
                dose[k, j, i] = dose_iec(px - ISO[0], pz - ISO[2], -(py - ISO[1]))
    scaling = 1e-6
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = "1.2.840.10008.5.1.4.1.1.481.2"
    meta.MediaStorageSOPInstanceUID = generate_uid(entropy_srcs=["beamproof-demo", path.name])
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    ds = Dataset()
    ds.file_meta = meta
    ds.SOPClassUID = meta.MediaStorageSOPClassUID
    ds.SOPInstanceUID = meta.MediaStorageSOPInstanceUID
    ds.StudyInstanceUID = generate_uid(entropy_srcs=["beamproof-demo", "study"])
    ds.SeriesInstanceUID = generate_uid(entropy_srcs=["beamproof-demo", path.name, "series"])
    ds.FrameOfReferenceUID = generate_uid(entropy_srcs=["beamproof-demo", "for"])
    ds.PatientName = "Water^Phantom"
    ds.PatientID = "DEMO-PHANTOM"
    ds.Modality = "RTDOSE"
    ds.SamplesPerPixel = 1
    ds.PhotometricInterpretation = "MONOCHROME2"
    ds.Rows, ds.Columns, ds.NumberOfFrames = len(ys), len(xs), len(zs)
    ds.FrameIncrementPointer = 0x3004000C
    ds.GridFrameOffsetVector = [float(z - zs[0]) for z in zs]
    ds.ImagePositionPatient = [float(xs[0]), float(ys[0]), float(zs[0])]
    ds.ImageOrientationPatient = [1, 0, 0, 0, 1, 0]
    ds.PixelSpacing = [5.0, 4.0]
    ds.BitsAllocated = ds.BitsStored = 32
    ds.HighBit = 31
    ds.PixelRepresentation = 0
    ds.DoseUnits, ds.DoseType, ds.DoseSummationType = "GY", "PHYSICAL", "PLAN"
    ds.DoseGridScaling = scaling
    ds.PixelData = np.round(dose / scaling).astype("<u4").tobytes()
    ds.save_as(path, enforce_file_format=True)


def write_points(path, rows, unit="Gy", note=""):
    lines = ["# beamproof-data: 1", "# shape: points", f"# dose-unit: {unit}", "# position-unit: mm"]
    if note:
        lines.append(f"# description: {note}")
    lines.append("label,x,y,z,dose")
    lines += [f"{label},{x:.1f},{y:.1f},{z:.1f},{d:.4f}" for label, x, y, z, d in rows]
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("\n".join(lines) + "\n")


# Chamber points for the 10 x 10 field: central axis at three depths, two off-axis.
CAX_POINTS = [("d50", 0, 0, 50), ("d100", 0, 0, 0), ("d150", 0, 0, -50), ("x-30", -30, 0, 0), ("x+30", 30, 0, 0)]
# Invented relative deviations (measured / calculated - 1) per machine and point.
CAX_DEV = {
    "lin-a": [0.004, -0.002, 0.006, -0.005, 0.003],
    "lin-b": [0.007, 0.004, 0.017, -0.003, 0.009],
}
# Reference output: 2 Gy planned at 10 cm; lin-a has a deliberate 3.6 % output error.
OUTPUT_DEV = {"lin-a": 0.036, "lin-b": 0.008}
# Prostate plan, chamber in a body phantom: invented TPS point doses and deviations.
PROSTATE = [("iso", 0, 0, 0, 2.000), ("ptv-sup", 0, 25, 5, 1.962), ("rectum", 0, -5, -35, 1.105)]
PROSTATE_DEV = {"lin-a": [0.006, -0.011, 0.018], "lin-b": [-0.004, 0.009, -0.015]}

DATA.mkdir(exist_ok=True)
(DATA / "tps").mkdir(parents=True, exist_ok=True)
write_rtdose(DATA / "tps" / "open-6x-10x10.dcm")
write_points(DATA / "tps" / "output-6x.csv", [("ref", 0, 0, 0, 2.0)], note="planned dose at the reference point")
write_points(DATA / "tps" / "prostate-points.csv", PROSTATE, note="planning-system point doses")
for machine in ("lin-a", "lin-b"):
    rows = [(lbl, x, y, z, dose_iec(x, y, z) * (1 + dev)) for (lbl, x, y, z), dev in zip(CAX_POINTS, CAX_DEV[machine])]
    write_points(DATA / machine / "cax-6x-10x10.csv", rows, note=f"ion chamber in water, {machine}")
    write_points(DATA / machine / "output-6x.csv", [("ref", 0, 0, 0, 200.0 * (1 + OUTPUT_DEV[machine]))], unit="cGy",
                 note=f"reference output, {machine}")
    rows = [(lbl, x, y, z, d * (1 + dev)) for (lbl, x, y, z, d), dev in zip(PROSTATE, PROSTATE_DEV[machine])]
    write_points(DATA / machine / "prostate-chamber.csv", rows, note=f"chamber in body phantom, {machine}")

def write_plane(path, xs, ys, f, note):
    lines = ["# beamproof-data: 1", "# shape: plane", "# plane: xy", "# plane-offset: 0", "# dose-unit: Gy",
             "# position-unit: mm", f"# description: {note}", "y\\x," + ",".join(f"{x:.1f}" for x in xs)]
    for y in ys:
        lines.append(f"{y:.1f}," + ",".join(f"{f(x, y):.4f}" for x in xs))
    path.write_text("\n".join(lines) + "\n")


def write_curve(path, zs, f, note):
    lines = ["# beamproof-data: 1", "# shape: curve", "# axis: depth", "# dose-unit: %", "# position-unit: mm",
             f"# description: {note}", "position,dose"]
    lines += [f"{d:.1f},{f(d):.3f}" for d in zs]
    path.write_text("\n".join(lines) + "\n")


# Film-like plane at the isocentre (coronal, IEC z = 0), 2 mm pixels, seeded noise; lin-b's
# film shows a 1 mm shift towards +x and 1 % more dose.
rng = np.random.default_rng(20261120)
film_axis = [float(v) for v in np.arange(-70.0, 70.1, 2.0)]
FILM = {"lin-a": (0.0, 1.000), "lin-b": (1.0, 1.010)}
for machine, (shift, scale) in FILM.items():
    noise = rng.normal(0.0, 0.006, size=(len(film_axis), len(film_axis)))
    grid = {(x, y): noise[j, i] for j, y in enumerate(film_axis) for i, x in enumerate(film_axis)}
    write_plane(DATA / machine / "film-6x-10x10.csv", film_axis, film_axis,
                lambda x, y: scale * dose_iec(x - shift, y, 0.0) * (1 + grid[(x, y)]), f"film plane, {machine}")

# Depth dose on the central axis, percent of the maximum: calculated from the model, measured
# with seeded noise.
depths = [float(v) for v in np.arange(0.0, 250.1, 2.0)]
pdd_max = max(depth_factor(d) for d in depths)
write_curve(DATA / "tps" / "pdd-6x-10x10.csv", depths, lambda d: 100 * depth_factor(d) / pdd_max, "calculated depth dose")
for machine in ("lin-a", "lin-b"):
    noise = dict(zip(depths, rng.normal(0.0, 0.002, size=len(depths))))
    write_curve(DATA / machine / "pdd-6x-10x10.csv", depths, lambda d: 100 * depth_factor(d) / pdd_max * (1 + noise[d]),
                f"water-tank depth dose, {machine}")

# Crossplane profile at 10 cm depth (IEC z = 0), 1 mm steps, percent of the central axis; the
# measured scans carry seeded noise, lin-b's is 0.6 mm wider on each side.
xs_prof = [float(v) for v in np.arange(-90.0, 90.1, 1.0)]


def write_profile(path, fn, note):
    lines = ["# beamproof-data: 1", "# shape: curve", "# axis: x", "# dose-unit: %", "# position-unit: mm",
             f"# description: {note}", "position,dose"]
    lines += [f"{x:.1f},{fn(x):.3f}" for x in xs_prof]
    path.write_text("\n".join(lines) + "\n")


cax = dose_iec(0.0, 0.0, 0.0)
write_profile(DATA / "tps" / "profile-6x-10x10-x.csv", lambda x: 100 * dose_iec(x, 0.0, 0.0) / cax, "calculated crossplane profile")
for machine, widen in (("lin-a", 0.0), ("lin-b", 0.6)):
    noise = dict(zip(xs_prof, rng.normal(0.0, 0.002, size=len(xs_prof))))
    scale = (50.0 + widen) / 50.0
    write_profile(DATA / machine / "profile-6x-10x10-x.csv", lambda x: 100 * dose_iec(x / scale, 0.0, 0.0) / cax * (1 + noise[x]),
                  f"water-tank crossplane profile, {machine}")
print("demo data written to", DATA)
