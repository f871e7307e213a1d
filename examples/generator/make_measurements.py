#!/usr/bin/python3
"""Make the invented commissioning measurements of the demo machine DEMO-E1.

INVENTED DEMO DATA: not a real machine, not for clinical use. The profiles
follow shapes that the literature describes in words (see
models/README.md): a steep fall over the first centimetres from electrons
scattered in the phantom, wider at higher energy and depth; a local maximum
a few centimetres out from electrons scattered by the applicator, strongest
at low energy and at the surface, gone a centimetre or two deeper; and a
slow tail of bremsstrahlung and leakage that rises with energy. The
magnitudes are plausible, not measured.

Beam tilt and SSD (invented, after the shapes described in words in the
trade, common practice): on the side a tilted beam leans away from (negative
tilt: the surface rises toward the source there) the applicator-scatter peak
moves toward the central axis by 0.5 mm a degree (7.5 mm at 15 deg) and
rises; on the side it leans toward (positive tilt) the peak moves out and
widens and the near fall-off lengthens. A longer air gap (SSD 110 cm)
widens the near fall-off and the peak and raises the relative dose near the
edge; the central-axis output falls by about the inverse square. Tilted
profiles are given per side by edge distance, each at its signed tilt, for
9 and 12 MeV with A10 at every depth; 9 MeV A10 is also measured at SSD 110
cm (normal incidence and the same tilts), with its output there.

Each point carries multiplicative
noise of 2 % (one standard deviation) with a fixed seed, so the output is
the same every run.

Writes examples/commissioning/demo-e1/measurements.yaml and its profiles/
folder (PyYAML, Debian python3-yaml, and the csv module write them).

Run: /usr/bin/python3 examples/generator/make_measurements.py [OUTDIR]
"""
import csv
import math
import os
import random
import sys

import yaml

NOTICE = "INVENTED DEMO DATA - NOT A REAL MACHINE - NOT FOR CLINICAL USE"
ENERGIES = [6, 9, 12, 16, 20]
APPLICATORS = [("A06", 6.0), ("A10", 10.0), ("A15", 15.0), ("A20", 20.0), ("A25", 25.0)]
INSERTS = [("C4", "A06", "circle", 4.0), ("C6", "A10", "circle", 6.0)]
SSD = 100.0
TILTS = [-15.0, -10.0, -5.0, 5.0, 10.0, 15.0]
TILTED = [(9, "A10"), (12, "A10")]
EXTENDED = (9, "A10", 110.0)


def dmax_cm(e):
    return round(1.0 + 0.06 * e, 2)


def pdd(e, z):
    """Central-axis percent depth dose (invented, plausible): a build-up from
    the surface to dmax, 90 % at R90 = E/3.2 cm, falling to the bremsstrahlung
    tail at Rp = E/2 cm."""
    surface = 74.0 + 1.0 * e
    zm, r90, rp = dmax_cm(e), e / 3.2, e / 2.0
    tail = 0.1 + 0.06 * e
    if z <= zm:
        return surface + (100.0 - surface) * z / zm
    if z <= r90:
        return 100.0 - 10.0 * (z - zm) / (r90 - zm)
    if z <= rp:
        return 90.0 - (90.0 - tail) * (z - r90) / (rp - r90)
    return tail


def components(e, size, z, insert_size=None, tilt=0.0, gap=0.0):
    """(A, l1, B, mu, s, C, l2) of the invented truth; tilt (deg, signed:
    > 0 the beam leans toward this side) and gap (cm beyond the nominal SSD)
    move it as the module's docstring says."""
    opening = insert_size or size
    c = (0.25 + 0.11 * e) * (10.0 / size) ** 0.25 * (1.15 if insert_size else 1.0)
    l2 = 9.0 + 0.25 * e + 0.3 * size
    b0 = 2.6 * (6.0 / e) ** 0.8 * (1.3 if insert_size else 1.0)
    b = b0 * math.exp(-z / (0.09 * e))
    mu = 2.0 + 0.5 * (size - opening) / 2 + 0.06 * size
    s = 1.1 + 0.04 * size
    l1 = 0.32 + 0.035 * e + 0.12 * z
    if tilt < 0:
        mu = max(mu + 0.05 * tilt, 0.8)
        b *= 1.0 - 0.01 * tilt
    elif tilt > 0:
        mu += 0.02 * tilt
        s *= 1.0 + 0.01 * tilt
        b *= 1.0 - 0.01 * tilt
        l1 *= 1.0 + 0.005 * tilt
    if gap:
        l1 *= 1.0 + 0.02 * gap
        s *= 1.0 + 0.015 * gap
        mu += 0.05 * gap
    edge = 0.5 * pdd(e, z)
    a = max(edge - c - b * math.exp(-mu * mu / (2 * s * s)), 0.2 * edge)
    if gap:
        a *= 1.0 + 0.01 * gap
    return a, l1, b, mu, s, c, l2


def truth(d, comp):
    a, l1, b, mu, s, c, l2 = comp
    return a * math.exp(-d / l1) + b * math.exp(-((d - mu) ** 2) / (2 * s * s)) + c * math.exp(-d / l2)


def distances(dmax):
    out, d = [], 0.0
    while d <= dmax + 1e-9:
        out.append(round(d, 3))
        d += 0.25 if d < 5 else 0.5 if d < 10 else 1.0 if d < 25 else 2.5
    return out


def noisy(v, rnd):
    return v * (1.0 + 0.02 * rnd.gauss(0, 1)) + 0.002 * rnd.gauss(0, 1)


def main():
    outdir = sys.argv[1] if len(sys.argv) > 1 else os.path.join(
        os.path.dirname(os.path.abspath(__file__)), "..", "commissioning", "demo-e1")
    os.makedirs(os.path.join(outdir, "profiles"), exist_ok=True)
    rnd = random.Random(20261201)
    profiles, outputs = [], []
    app_size = dict(APPLICATORS)
    for e in ENERGIES:
        for app, size in APPLICATORS:
            factors = []
            for ins, ins_app, shape, isz in INSERTS:
                if ins_app == app:
                    factors.append({"insert": ins, "factor": round(0.90 + 0.004 * e, 3)})
            out = {"energy_mev": e, "applicator": app,
                   "dose_per_mu_cgy": round(1.0 - 0.004 * abs(size - 10) + 0.001 * e, 3),
                   "dmax_cm": dmax_cm(e),
                   "effective_ssd_cm": round(88.0 + 0.4 * e + 0.3 * size, 1)}
            if factors:
                out["cutout_factors"] = factors
            outputs.append(out)
            if (e, app) == EXTENDED[:2]:
                # measured at the extended SSD too: about the inverse square
                gap = EXTENDED[2] - SSD
                r = (out["effective_ssd_cm"] + out["dmax_cm"]) / (
                    out["effective_ssd_cm"] + gap + out["dmax_cm"])
                outputs.append({"energy_mev": e, "applicator": app,
                                "dose_per_mu_cgy": round(out["dose_per_mu_cgy"] * r * r * 0.99, 3),
                                "dmax_cm": out["dmax_cm"],
                                "effective_ssd_cm": out["effective_ssd_cm"],
                                "ssd_cm": EXTENDED[2]})
    # 0, 0.5, 1, 2 cm, dmax, and E/4 cm, beyond which out-of-field dose is
    # nearly constant with depth (published measurements; see models/README.md)
    depths_of = {e: sorted({0.0, 0.5, 1.0, 2.0, dmax_cm(e), e / 4.0}) for e in ENERGIES}
    # open applicators, every energy and depth, crossplane, distance from the edge
    for e in ENERGIES:
        for app, size in APPLICATORS:
            for z in depths_of[e]:
                comp = components(e, size, z)
                name = "e%02d_%s_open_d%.2f.csv" % (e, app.lower(), z)
                rows = [(d, noisy(truth(d, comp), rnd)) for d in distances(40.0)]
                write_csv(outdir, name, "edge_distance_cm", "dose_percent", rows)
                profiles.append(profile(e, app, "open", z, "crossplane", name))
    # the two cutouts
    for ins, app, shape, isz in INSERTS:
        for e in ENERGIES:
            for z in depths_of[e]:
                comp = components(e, app_size[app], z, insert_size=isz)
                name = "e%02d_%s_%s_d%.2f.csv" % (e, app.lower(), ins.lower(), z)
                rows = [(d, noisy(truth(d, comp), rnd)) for d in distances(20.0)]
                write_csv(outdir, name, "edge_distance_cm", "dose_percent", rows)
                profiles.append(profile(e, app, ins, z, "crossplane", name))
    # 9 MeV A10 also measured inplane, through the field, as raw chamber readings
    cax = 2.468  # nC at the central-axis maximum (invented)
    for z in depths_of[9]:
        comp = components(9, 10.0, z)
        half = 5.0 * (SSD + z) / SSD
        rows = []
        x = -27.0
        while x <= 27.0 + 1e-9:
            ax = abs(x)
            if ax < half - 1.0:
                v = pdd(9, z) * (1 - 0.02 * (ax / half) ** 4)
            elif ax <= half:
                # penumbra from the flat region to 50 % at the edge
                t = (half - ax) / 1.0
                v = 0.5 * pdd(9, z) * (1 + t)
            else:
                v = truth(ax - half, comp)
            rows.append((round(x, 3), noisy(v, rnd) * cax / 100.0))
            x += 0.25 if abs(x) < half + 5 else 1.0
        name = "e09_a10_open_d%.2f_inplane_through.csv" % z
        write_csv(outdir, name, "off_axis_cm", "reading", rows)
        p = profile(9, "A10", "open", z, "inplane", name)
        p["cax_reading"] = cax
        profiles.append(p)
    # tilted beams, each side at its signed tilt, by edge distance
    for e, app in TILTED:
        for t in TILTS:
            for z in depths_of[e]:
                comp = components(e, app_size[app], z, tilt=t)
                name = "e%02d_%s_open_d%.2f_tilt%+03d.csv" % (e, app.lower(), z, t)
                rows = [(d, noisy(truth(d, comp), rnd)) for d in distances(40.0)]
                write_csv(outdir, name, "edge_distance_cm", "dose_percent", rows)
                p = profile(e, app, "open", z, "crossplane", name)
                p["tilt_deg"] = t
                profiles.append(p)
    # one applicator at an extended SSD, normal incidence
    e, app, ssd = EXTENDED
    for z in depths_of[e]:
        comp = components(e, app_size[app], z, gap=ssd - SSD)
        name = "e%02d_%s_open_d%.2f_ssd%03d.csv" % (e, app.lower(), z, ssd)
        rows = [(d, noisy(truth(d, comp), rnd)) for d in distances(40.0)]
        write_csv(outdir, name, "edge_distance_cm", "dose_percent", rows)
        p = profile(e, app, "open", z, "crossplane", name)
        p["ssd_cm"] = ssd
        profiles.append(p)
    # and tilted there, so that a tilted beam at an SSD between the two is
    # interpolated over all four corners
    for t in TILTS:
        for z in depths_of[e]:
            comp = components(e, app_size[app], z, tilt=t, gap=ssd - SSD)
            name = "e%02d_%s_open_d%.2f_tilt%+03d_ssd%03d.csv" % (e, app.lower(), z, t, ssd)
            rows = [(d, noisy(truth(d, comp), rnd)) for d in distances(40.0)]
            write_csv(outdir, name, "edge_distance_cm", "dose_percent", rows)
            p = profile(e, app, "open", z, "crossplane", name)
            p["tilt_deg"] = t
            p["ssd_cm"] = ssd
            profiles.append(p)
    doc = {
        "format": "strayline-measurements",
        "format_version": 2,
        "notice": NOTICE,
        "machine": {"name": "DEMO-E1", "description": "invented electron linac for the strayline demo",
                    "nominal_ssd_cm": SSD, "sad_cm": 100.0, "invented": True},
        "measured": {"date": "2026-11-20", "by": "demo physicist (invented)",
                     "detector": "plane-parallel ion chamber in water (invented)"},
        "reference": "percent of the central-axis maximum dose of the same energy, applicator and "
                     "insert at the nominal SSD (open profiles: the open field's; each insert's "
                     "profiles: that insert's own, as its profiles_relative_to says)",
        "applicators": [{"id": a, "shape": "square", "field_x_cm": s, "field_y_cm": s,
                         "source_to_end_cm": 95.0} for a, s in APPLICATORS],
        "inserts": [{"id": i, "applicator": a, "shape": sh, "size_x_cm": sz, "size_y_cm": sz,
                     "profiles_relative_to": "insert_cax"}
                    for i, a, sh, sz in INSERTS],
        "outputs": outputs,
        "profiles": profiles,
    }
    with open(os.path.join(outdir, "measurements.yaml"), "w") as f:
        f.write("# strayline measurement set. %s\n" % NOTICE)
        f.write("# Made by examples/generator/make_measurements.py; see models/README.md.\n")
        yaml.safe_dump(doc, f, sort_keys=False, default_flow_style=False, width=100)
    print("%d profiles written to %s" % (len(profiles), outdir))


def profile(e, app, ins, z, direction, name):
    return {"energy_mev": e, "applicator": app, "insert": ins, "depth_cm": z,
            "direction": direction, "file": "profiles/" + name,
            "uncertainty": {"relative": 0.02, "floor_percent": 0.002}}


def write_csv(outdir, name, xcol, ycol, rows):
    with open(os.path.join(outdir, "profiles", name), "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow([xcol, ycol])
        for x, y in rows:
            w.writerow(["%g" % x, "%.5g" % y])


if __name__ == "__main__":
    main()
