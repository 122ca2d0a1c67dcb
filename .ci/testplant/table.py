#!/usr/bin/python3
"""Tables of loop.py's rows (an instrument beside flowset, not a test).

usage: table.py ROWS.jsonl ... [--per-plant] [--vs OTHER.jsonl ...]

Loop rows: per plant rms (% of design, branches whose valve works) / in10 (%, every branch) of the
plan, after flowset's points and trims (fs), after random points and trims, the all-knowing best and
design only; then the issue's counts. Survey rows (loop.py --survey): in10 of the plan from flowset's
partial survey against a random one. --vs: a second run's fs rms beside the first's.
"""
import json
import statistics
import sys


def rows(paths):
    out = {}
    for p in paths:
        with open(p) as fh:
            for line in fh:
                r = json.loads(line)
                out[r["name"]] = r
    return out


def main():
    args = sys.argv[1:]
    per = "--per-plant" in args
    args = [a for a in args if a != "--per-plant"]
    vs = []
    if "--vs" in args:
        i = args.index("--vs")
        args, vs = args[:i], args[i + 1:]
    a = rows(args)
    b = rows(vs) if vs else {}
    errs = [n for n, r in a.items() if "error" in r]
    ok = {n: r for n, r in a.items() if "error" not in r}
    for n in errs:
        print("error", n, a[n]["error"][:300])
    survey = any("plan" not in r and "fs" in r for r in ok.values())
    if survey:
        print("| plant | n | k | flowset in10 / rms | random in10 / rms | best in10 / rms |")
        print("|---|---|---|---|---|---|")
        ge = 0
        for n in sorted(ok):
            r = ok[n]
            ge += r["fs"]["in10"] >= r["random"]["in10"] - 1e-9
            if per:
                print("| %s | %d | %d | %.0f / %.2f | %.0f / %.2f | %.0f / %.2f |" % (
                    n, r["n"], r["k"], r["fs"]["in10"], r["fs"]["rms"], r["random"]["in10"],
                    r["random"]["rms"], r["best"]["in10"], r["best"]["rms"]))
        print("\nsurvey loop: flowset's in10 >= random's on %d of %d" % (ge, len(ok)))
        n = len(ok) or 1
        print("summed rms: flowset %.1f, random %.1f; mean in10 flowset %.1f, random %.1f; lower rms on %d" % (
            sum(r["fs"]["rms"] for r in ok.values()), sum(r["random"]["rms"] for r in ok.values()),
            sum(r["fs"]["in10"] for r in ok.values()) / n, sum(r["random"]["in10"] for r in ok.values()) / n,
            sum(r["fs"]["rms"] < r["random"]["rms"] - 0.005 for r in ok.values())))
        return
    head = "| plant | n | k | plan | flowset's points | random points | best | design |"
    if b:
        head += " other |"
    print(head)
    print("|---|---|---|---|---|---|---|---|" + ("---|" if b else ""))
    lower = equal = higher = 0
    sums = dict(plan=0, fs=0, random=0, best=0, design=0, other=0)
    ratios, serv, serv_ok = [], 0, 0
    for n in sorted(ok):
        r = ok[n]
        d = r["fs"]["rms"] - r["random"]["rms"]
        lower += d < -0.005
        higher += d > 0.005
        equal += abs(d) <= 0.005
        for k in ("plan", "fs", "random", "best", "design"):
            sums[k] += r[k]["rms"]
        ratios.append(r["fs"]["rms"] / max(r["best"]["rms"], 1e-9))
        if r["best"]["in10"] >= 99.999:
            serv += 1
            serv_ok += r["fs"]["in10"] >= 99 and r["fs"]["rms"] <= 1.2 * r["best"]["rms"]
        line = "| %s | %d | %d | %s |" % (n, r["n"], r["k"], " | ".join(
            "%.2f / %.0f" % (r[k]["rms"], r[k]["in10"]) for k in ("plan", "fs", "random", "best", "design")))
        if b:
            o = b.get(n)
            if o and "fs" in o:
                sums["other"] += o["fs"]["rms"]
                line += " %.2f |" % o["fs"]["rms"]
            else:
                line += " - |"
        if per:
            print(line)
    print()
    print("plants %d: flowset's points lower rms than random on %d, equal %d, higher %d" % (
        len(ok), lower, equal, higher))
    print("summed rms: plan %.1f, flowset %.1f, random %.1f, best %.1f, design %.1f%s" % (
        sums["plan"], sums["fs"], sums["random"], sums["best"], sums["design"],
        (", other %.1f" % sums["other"]) if b else ""))
    print("flowset over best: median %.2fx, mean %.2fx; loop 1 met (in10 >= 99, rms <= 1.2x best) on %d of %d "
          "plants whose best reaches in10 100" % (statistics.median(ratios), statistics.mean(ratios), serv_ok, serv))
    # By size: on small plants k is one or two points, often the same ones or none that any trim acts on.
    for lo in (20, 50, 100):
        sel = [r for r in ok.values() if r["n"] >= lo]
        if sel:
            low = sum(r["fs"]["rms"] < r["random"]["rms"] - 0.005 for r in sel)
            eq = sum(abs(r["fs"]["rms"] - r["random"]["rms"]) <= 0.005 for r in sel)
            print("plants of %d branches or more: lower on %d of %d (%.0f %%), equal %d" % (
                lo, low, len(sel), 100.0 * low / len(sel), eq))


if __name__ == "__main__":
    main()
