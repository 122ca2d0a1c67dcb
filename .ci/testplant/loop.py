#!/usr/bin/python3
"""The visit's loops on the independent test plant (an instrument beside flowset, not a test).

usage: loop.py FLOWSET SET_DIR OUT.jsonl [--only NAME ...] [--jobs J] [--survey] [--seed K]

For every scenario NAME.json of SET_DIR (made by gen.py or plantsim.py suite):

  plan     public view -> site -> flowset run -> settings -> plantsim score
  best     plantsim oracle, scored the same way
  design   plantsim naive (the survey ignored)
  fs       the plan applied, then plantsim resurvey at the first k branches of read-next.json
           (k = max(1, floor(0.15 n)), plus the pump) -> flowset trim --plan -> score
  random   the same with k branches drawn at random (seeded by the plant's name and --seed)

With --survey, loop 3 instead: the survey kept only at k = max(1, floor(0.30 n)) branches (plus the
pump), chosen by flowset's read-next.json on the site without readings (survey_before_setting), or at
random; each partial survey planned and scored.

One JSON row per plant is appended to OUT.jsonl. Env TRIMARGS: extra arguments to flowset trim.
rms: over branches whose valve works (plantsim's `adjustable`), in % of design.
"""
import argparse
import hashlib
import json
import math
import os
import random
import shutil
import subprocess
import sys
import tempfile
from concurrent.futures import ThreadPoolExecutor

HERE = os.path.dirname(os.path.abspath(__file__))
PY = "/usr/bin/python3"
PLANTSIM = os.environ.get("PLANTSIM", os.path.join(HERE, "..", "..", "..", "shared", "testplant", "plantsim.py"))
ADAPTER = os.environ.get("ADAPTER", "/tmp/adapter")


def sh(cmd):
    p = subprocess.run(cmd, capture_output=True, text=True)
    return p.returncode, p.stdout, p.stderr


def must(cmd, ok=(0,)):
    rc, so, se = sh(cmd)
    if rc not in ok:
        raise RuntimeError("%s: rc %d: %s" % (" ".join(cmd[:3]), rc, se[-800:]))
    return rc


def score(scen, settings, out):
    must([PY, PLANTSIM, "score", "--scenario", scen, "--settings", settings, "--brief", "--out", out])
    with open(out) as fh:
        s = json.load(fh)
    return {"rms": 100 * s["adjustable"]["rms_dev"], "in10": 100 * s["within_10pct"],
            "in10_adj": s["adjustable"].get("within_10pct"), "all_rms": 100 * s["rms_dev"]}


def plan_site(fs, pub, w, tag):
    site = os.path.join(w, tag + "-site")
    out = os.path.join(w, tag + "-out")
    must([PY, os.path.join(ADAPTER, "to_site.py"), pub, site])
    must([fs, "run", site, "--out", out, "--force", "--quiet"], ok=(0, 5))
    st = os.path.join(w, tag + ".settings.json")
    must([PY, os.path.join(ADAPTER, "to_settings.py"), out, st])
    return site, out, st


def first_branches(readnext, k, checks=None):
    """The first k branches read-next.json ranks; with checks (a dict), a branch whose first
    reading is a check (at_setting: read once with its valve moved there, then put back) is
    recorded in it, branch -> setting. The check counts as the branch's one point."""
    with open(readnext) as fh:
        d = json.load(fh)
    got = []
    for r in d.get("readings") or []:
        w = r.get("where")
        if w and w != "pump" and w not in got:
            got.append(w)
            if checks is not None and r.get("at_setting") is not None:
                checks[w] = r["at_setting"]
        if len(got) == k:
            break
    return got


def drawn(ids, k, name, seed):
    h = int(hashlib.sha256(("%s/%d" % (name, seed)).encode()).hexdigest()[:12], 16)
    return sorted(random.Random(h).sample(ids, k))


def trim_settings(trimjson, plan_settings, out):
    with open(trimjson) as fh:
        t = json.load(fh)
    with open(plan_settings) as fh:
        ps = json.load(fh)
    st = dict(ps["settings"])
    for b in t["branches"]:
        if b.get("valve") and b.get("new_setting") is not None:
            st[b["branch"]] = b["new_setting"]
    p = t.get("pump") or {}
    pump = ps["pump"]
    if p.get("boundary") == "pump" and p.get("speed_ratio") is not None:
        pump = {"speed_ratio": p["speed_ratio"]}
    elif p.get("set_point_pa") is not None:
        pump = {"dp_setpoint_kPa": p["set_point_pa"] / 1000.0}
    with open(out, "w") as fh:
        json.dump({"settings": st, "pump": pump}, fh)


def checked(scen, w, plan_st, checks, tag, seed):
    """The checks, each a survey state of its own read before the round: the plan's settings but
    the checked valve at its check setting, that branch and the pump read."""
    if not checks:
        return scen
    with open(plan_st) as fh:
        ps = json.load(fh)
    for n, (b, at) in enumerate(sorted(checks.items())):
        st = dict(ps, settings=dict(ps["settings"], **{b: at}))
        f = os.path.join(w, "%s.check%d.settings.json" % (tag, n))
        with open(f, "w") as fh:
            json.dump(st, fh)
        pts = os.path.join(w, "%s.check%d.points.json" % (tag, n))
        with open(pts, "w") as fh:
            json.dump({"branches": [b], "pump": True}, fh)
        out = os.path.join(w, "%s.check%d.scen.json" % (tag, n))
        must([PY, PLANTSIM, "resurvey", "--scenario", scen, "--settings", f, "--seed", str(seed + 100 + n),
              "--points", pts, "--id", "check_" + b, "--out", out])
        scen = out
    return scen


def one_round(fs, scen, w, name, planout, plan_st, branches, tag, seed, checks=None):
    base = checked(scen, w, plan_st, checks, tag, seed)
    pts = os.path.join(w, tag + ".points.json")
    with open(pts, "w") as fh:
        json.dump({"branches": branches, "pump": True}, fh)
    s2 = os.path.join(w, tag + ".scen.json")
    must([PY, PLANTSIM, "resurvey", "--scenario", base, "--settings", plan_st, "--seed", str(seed),
          "--points", pts, "--id", "after_plan", "--out", s2])
    pub2 = os.path.join(w, tag + ".public.json")
    must([PY, PLANTSIM, "public", "--scenario", s2, "--out", pub2])
    site2 = os.path.join(w, tag + "-site")
    must([PY, os.path.join(ADAPTER, "to_site.py"), pub2, site2])
    tr = os.path.join(w, tag + "-trim")
    extra = os.environ.get("TRIMARGS", "").split()
    must([fs, "trim", site2, "--plan", os.path.join(planout, "plan.json"), "--out", tr, "--force",
          "--quiet"] + extra, ok=(0, 5))
    st2 = os.path.join(w, tag + ".trim.settings.json")
    trim_settings(os.path.join(tr, "trim.json"), plan_st, st2)
    r = score(s2, st2, os.path.join(w, tag + ".trim.score.json"))
    r["points"] = branches
    if checks:
        r["checks"] = checks
    return r


def baseline(scen, who, w):
    st = os.path.join(w, who + ".settings.json")
    must([PY, PLANTSIM, who, "--scenario", scen, "--out", st])
    return score(scen, st, os.path.join(w, who + ".score.json"))


def filtered(pub, keep, out):
    with open(pub) as fh:
        d = json.load(fh)
    for s in d["survey"]["states"]:
        s["readings"] = [r for r in s["readings"] if r["where"] == "pump" or r["where"] in keep]
    with open(out, "w") as fh:
        json.dump(d, fh)


def survey_loop(fs, scen, pub, w, name, ids, seed):
    k = max(1, int(math.floor(0.30 * len(ids) + 1e-9)))
    empty = os.path.join(w, "empty.public.json")
    filtered(pub, set(), empty)
    with open(empty) as fh:
        d = json.load(fh)
    for s in d["survey"]["states"]:
        s["readings"] = []
    d["survey"]["states"] = d["survey"]["states"][:1]
    with open(empty, "w") as fh:
        json.dump(d, fh)
    site = os.path.join(w, "empty-site")
    out = os.path.join(w, "empty-out")
    must([PY, os.path.join(ADAPTER, "to_site.py"), empty, site])
    must([fs, "run", site, "--out", out, "--force", "--quiet"], ok=(0, 5))
    row = {"k": k}
    for tag, keep in (("fs", first_branches(os.path.join(out, "read-next.json"), k)),
                      ("random", drawn(ids, k, name, seed))):
        p = os.path.join(w, "sv-" + tag + ".public.json")
        filtered(pub, set(keep), p)
        _, _, st = plan_site(fs, p, w, "sv-" + tag)
        row[tag] = score(scen, st, os.path.join(w, "sv-" + tag + ".score.json"))
        row[tag]["points"] = keep
    return row


def plant(a, name):
    scen = os.path.join(a.set_dir, name + ".json")
    w = os.path.join(a.work, name)
    os.makedirs(w, exist_ok=True)
    pub = os.path.join(w, "public.json")
    must([PY, PLANTSIM, "public", "--scenario", scen, "--out", pub])
    with open(pub) as fh:
        ids = [b["id"] for b in json.load(fh)["design"]["branches"]]
    row = {"name": name, "n": len(ids)}
    try:
        row["best"] = baseline(scen, "oracle", w)
        row["design"] = baseline(scen, "naive", w)
        if a.survey:
            row.update(survey_loop(a.flowset, scen, pub, w, name, ids, a.seed))
            return row
        _, out, st = plan_site(a.flowset, pub, w, "plan")
        row["plan"] = score(scen, st, os.path.join(w, "plan.score.json"))
        k = max(1, int(math.floor(0.15 * len(ids) + 1e-9)))
        row["k"] = k
        checks = {}
        pts = first_branches(os.path.join(out, "read-next.json"), k, checks)
        row["fs"] = one_round(a.flowset, scen, w, name, out, st, pts, "fs", a.seed, checks)
        row["random"] = one_round(a.flowset, scen, w, name, out, st, drawn(ids, k, name, a.seed),
                                  "random", a.seed)
    except Exception as e:  # one plant's failure is reported, the rest go on
        row["error"] = str(e)
    return row


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("flowset")
    ap.add_argument("set_dir")
    ap.add_argument("out")
    ap.add_argument("--only", nargs="*")
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--survey", action="store_true")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--keep", action="store_true", help="keep the work folders")
    a = ap.parse_args()
    a.flowset = os.path.abspath(a.flowset)
    names = sorted(f[:-5] for f in os.listdir(a.set_dir)
                   if f.endswith(".json") and not f.endswith(".public.json") and f != "suite.json")
    if a.only:
        names = [n for n in names if n in a.only]
    a.work = tempfile.mkdtemp(prefix="loop-")
    with ThreadPoolExecutor(a.jobs) as ex:
        rows = list(ex.map(lambda n: plant(a, n), names))
    with open(a.out, "a") as fh:
        for r in rows:
            fh.write(json.dumps(r) + "\n")
    if not a.keep:
        shutil.rmtree(a.work)
    else:
        print("work in", a.work)


if __name__ == "__main__":
    sys.exit(main())
