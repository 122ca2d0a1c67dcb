#!/usr/bin/python3
"""Whether flowset's bands hold what they claim, on the independent test plant.

usage: bands.py plan RUN_SUITE_DIR SET_DIR
       bands.py trim LOOP_WORK_DIR SET_DIR

plan: for a run_suite.sh output folder (one folder per plant, each with out/plan.json and
flowset.settings.json), how often the plan's 95 % band holds the flow the plan gives on the true plant,
and how many branches whose band lies in the tolerance are out of it.

trim: for a loop.py work folder kept with --keep, per round (flowset's points, random points) and per
branch read after setting or not: how often the band as left holds the true flow as left, the verdicts,
those called in tolerance that are out and the reverse; and how often the readings taken after setting at
flowset's points fall in the band read-next.json gave them.

An instrument beside the project, like loop.py: no project test uses it.
"""
import collections
import csv
import glob
import json
import os
import subprocess
import sys

PY = "/usr/bin/python3"
PLANTSIM = os.environ.get("PLANTSIM", os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "..",
                                                   "shared", "testplant", "plantsim.py"))


def flows(scen, settings, out):
    """The true flow over design of every branch under settings (plantsim score, full)."""
    if not os.path.exists(out):
        subprocess.run([PY, PLANTSIM, "score", "--scenario", scen, "--settings", settings, "--out", out],
                       check=True, capture_output=True)
    with open(out) as fh:
        return json.load(fh)["flow_ratio"]


def plan_bands(rsdir, setdir):
    n = held = inband = inband_out = 0
    for d in sorted(glob.glob(os.path.join(rsdir, "*/"))):
        name = os.path.basename(d.rstrip("/"))
        if not os.path.exists(d + "out/plan.json"):
            continue
        fr = flows(os.path.join(setdir, name + ".json"), d + "flowset.settings.json", d + "flowset.full.json")
        with open(d + "out/plan.json") as fh:
            plan = json.load(fh)
        for b in plan["branches"]:
            lo, hi = b.get("band_low_percent"), b.get("band_high_percent")
            if b["branch"] not in fr or lo is None or hi is None:
                continue
            t = 100 * fr[b["branch"]]
            n += 1
            held += lo <= t <= hi
            if b.get("band_in_tolerance"):
                inband += 1
                inband_out += not (90 <= t <= 110)
    print("plan bands: %d branches, the band holds the true flow for %d (%.0f %%); band inside the tolerance "
          "on %d, of them out of it %d" % (n, held, 100 * held / max(n, 1), inband, inband_out))


def trim_bands(work, setdir):
    tot = collections.Counter()
    for d in sorted(glob.glob(os.path.join(work, "*/"))):
        name = os.path.basename(d.rstrip("/"))
        if not os.path.exists(d + "plan.settings.json"):
            continue
        fr = flows(os.path.join(setdir, name + ".json"), d + "plan.settings.json", d + "plan.full.json")
        for tag in ("fs", "random"):
            if not os.path.exists(d + tag + "-trim/trim.csv"):
                continue
            with open(d + tag + "-trim/trim.csv") as fh:
                for r in csv.DictReader(fh):
                    b, v, rd = r["Branch"], r["Verdict as left"], r["Read after setting"]
                    try:
                        lo, hi = [float(x) for x in r["95 % band as left (%)"].split(" to ")]
                    except ValueError:
                        continue
                    if b not in fr:
                        continue
                    t = 100 * fr[b]
                    key = (tag, "read" if rd == "yes" else "not read")
                    tot[key + ("branches",)] += 1
                    tot[key + ("band holds the truth",)] += lo <= t <= hi
                    tot[key + (v,)] += 1
                    if "in tolerance" in v and not (90 <= t <= 110):
                        tot[key + (v + ", truly out",)] += 1
                    if "out of tolerance" in v and 90 <= t <= 110:
                        tot[key + (v + ", truly in",)] += 1
        # read-next's bands against the readings taken at flowset's points.
        if os.path.exists(d + "plan-out/read-next.json") and os.path.exists(d + "fs-site/readings.csv"):
            with open(d + "plan-out/read-next.json") as fh:
                rn = json.load(fh)
            got = {}
            with open(d + "fs-site/readings.csv") as fh:
                for r in csv.DictReader(fh):
                    scale = {"m3/h": 1 / 3600.0, "l/s": 1e-3, "m3/s": 1.0}.get(r["unit"])
                    if r["state"] == "after-plan" and r["quantity"] == "flow" and scale:
                        got[(r["where"], r["instrument"])] = float(r["value"]) * scale
            for c in rn.get("readings") or []:
                k = (c["where"], c["how"])
                if k in got and c.get("at_setting") is None:
                    tot[("read-next", c["how"], "readings")] += 1
                    tot[("read-next", c["how"], "in the band")] += c["band_low"] <= got[k] <= c["band_high"]
    for k in sorted(tot):
        print(" / ".join(k), tot[k])


def main():
    if len(sys.argv) != 4 or sys.argv[1] not in ("plan", "trim"):
        sys.exit(__doc__)
    (plan_bands if sys.argv[1] == "plan" else trim_bands)(sys.argv[2], sys.argv[3])


if __name__ == "__main__":
    main()
