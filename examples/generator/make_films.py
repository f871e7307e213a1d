#!/usr/bin/python3
"""Write the invented film campaign examples/commissioning/film-demo/: a calibration
scan and its calibration set, measurement films of one open 6 x 6 cm applicator at
1 cm depth (a short and a long exposure, merged by MU), and the film set.
INVENTED DEMO DATA - NOT A REAL FILM, SCANNER OR MACHINE - NOT FOR CLINICAL USE.

    /usr/bin/python3 examples/generator/make_films.py [OUT_DIR]

The tests call build_campaign() to make the same kind of campaign in a scratch folder.
"""
import os
import sys

import yaml

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import film_synth  # noqa: E402

NOTICE = "INVENTED DEMO DATA - NOT A REAL FILM, SCANNER OR MACHINE - NOT FOR CLINICAL USE"
CAL_DOSES = [0, 0, 2, 5, 10, 20, 30, 40, 60, 80, 100, 125, 150, 90]
CHECK = [False] * 13 + [True]   # the 90 cGy piece is held out and checked
FIELD_CM = 6.0
# Dose on the axis at each depth as a fraction of the central-axis maximum (invented).
DEPTHS = {1.0: 0.97, 2.0: 0.80}
DOSE_PER_MU = 1.0  # cGy a MU at the central-axis maximum (invented)
# An unexposed control piece scanned beside each film (AAPM TG-235), and its region read.
CONTROL_CM = [0.1, 0.1, 1.2, 1.2]
CONTROL_REGION_CM = [0.3, 0.3, 0.8, 0.8]


def measurement_block():
    """The machine part of the measurement set `film profile` writes (invented)."""
    return {
        "machine": {"name": "DEMO-FILM", "description": "invented electron linac for the film demo",
                    "nominal_ssd_cm": 100.0, "sad_cm": 100.0, "invented": True},
        "measured": {"date": "2026-11-20", "by": "demo physicist (invented)",
                     "detector": "radiochromic film in solid water (invented)"},
        "reference": "percent of the central-axis maximum dose of the open applicator at the "
                     "nominal SSD",
        "applicators": [{"id": "A06", "shape": "square", "field_x_cm": 6.0, "field_y_cm": 6.0,
                         "source_to_end_cm": 95.0}],
        "outputs": [{"energy_mev": 9, "applicator": "A06", "dose_per_mu_cgy": DOSE_PER_MU,
                     "dmax_cm": 1.5, "effective_ssd_cm": 94.0}],
    }


def dump(path, header, data):
    with open(path, "w") as f:
        f.write(header)
        yaml.safe_dump(data, f, sort_keys=False, default_flow_style=None, width=100)


# The shipped demo is small (about 0.4 MB of scans): coarse scans, one depth. The tests
# make the finer campaign of TEST_CAMPAIGN.
DEMO_DEPTHS = {1.0: 0.97}
TEST_CAMPAIGN = {"cal_dpi": 100, "film_dpi": 50, "width_cm": 16.0, "height_cm": 8.0,
                 "depths": DEPTHS}


def build_campaign(out, cal_dpi=60, film_dpi=40, width_cm=14.0, height_cm=7.5,
                   exposures=((100, 1), (1000, 2)), depths=None, angle_deg=0.0, seed=11):
    """Write scans/, calibration.yaml and films.yaml under `out`; return a description."""
    depths = DEMO_DEPTHS if depths is None else depths
    os.makedirs(os.path.join(out, "scans"), exist_ok=True)
    regions = film_synth.calibration_scan(os.path.join(out, "scans", "calibration.tif"),
                                          CAL_DOSES, dpi=cal_dpi, seed=seed)
    pieces = []
    for d, r, chk in zip(CAL_DOSES, regions, CHECK):
        p = {"scan": "scans/calibration.tif", "dose_cgy": d, "region_cm": r}
        if chk:
            p["check"] = True
        pieces.append(p)
    dump(os.path.join(out, "calibration.yaml"),
         "# strayline film calibration set. %s\n# Made by examples/generator/make_films.py; "
         "see models/README.md (film).\n" % NOTICE,
         {"format": "strayline-film-calibration", "format_version": 1, "notice": NOTICE,
          "invented": True, "film": {"lot": "DEMO-LOT-01 (invented)",
                                     "model": "radiochromic film (invented)"},
          "scanner": {"name": "demo flatbed scanner (invented)",
                      "settings": "transmission, 48-bit RGB, corrections off"},
          "exposed": "2026-11-18", "scanned": "2026-11-19", "channel": "red",
          "pieces": pieces})
    films = []
    k = 0
    for depth, frac in depths.items():
        for mu, tag in exposures:
            k += 1
            name = "e09_a06_d%.1f_%dmu.tif" % (depth, mu)
            film_synth.measurement_scan(os.path.join(out, "scans", name),
                                        frac * mu * DOSE_PER_MU, FIELD_CM, width_cm, height_cm,
                                        dpi=film_dpi, angle_deg=angle_deg, seed=seed + 10 * k,
                                        control_cm=CONTROL_CM)
            films.append({"id": "e09-a06-d%.1f-%dmu" % (depth, mu), "scan": "scans/" + name,
                          "energy_mev": 9, "applicator": "A06", "insert": "open",
                          "depth_cm": depth, "ssd_cm": 100.0, "tilt_deg": 0,
                          "image_x": "crossplane", "directions": ["crossplane"],
                          "monitor_units": mu, "cax_reference_cgy": mu * DOSE_PER_MU,
                          "unexposed_region_cm": list(CONTROL_REGION_CM)})
    dump(os.path.join(out, "films.yaml"),
         "# strayline film set. %s\n# Made by examples/generator/make_films.py; see "
         "models/README.md (film).\n" % NOTICE,
         {"format": "strayline-films", "format_version": 1, "notice": NOTICE, "invented": True,
          "band_width_cm": 0.4, "step_cm": 0.1, "median_filter_px": 0,
          "uncertainty": {"relative": 0.03, "floor_percent": 0.01},
          "measurement_set": measurement_block(), "films": films})
    return {"field_cm": FIELD_CM, "depths": depths, "films": films}


if __name__ == "__main__":
    here = os.path.dirname(os.path.abspath(__file__))
    out = sys.argv[1] if len(sys.argv) > 1 else os.path.join(here, "..", "commissioning",
                                                             "film-demo")
    build_campaign(out)
    print("wrote", out)
