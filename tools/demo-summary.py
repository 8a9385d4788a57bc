#!/usr/bin/env python3
"""Prints the demo's balance every 10 minutes and its alarm events (used by tools/demo)."""
import json
import sys


def main(rows_path, events_path, truth_path):
    rows = [json.loads(line) for line in open(rows_path)]
    print("Segment KR-1 every 10 minutes (rates in kg/s; a positive imbalance is mass missing):")
    print(f"{'time (UTC)':<20} {'status':<11} {'decision':<11} {'5 min':>8} {'mdl':>6} {'1 h':>8} {'mdl':>6} "
          f"{'leak est.':>9} {'location m':>10}")
    for r in rows[::600]:
        w = r["windows"]
        leak = "" if r.get("leak_rate_kg_s") is None or r.get("decision") in ("learning", "watching") \
            else f"{r['leak_rate_kg_s']:.2f}"
        loc = "" if r.get("location_m") is None else f"{r['location_m']:.0f}"
        print(f"{r['time'][:19]:<20} {r['status']:<11} {str(r.get('decision') or ''):<11} "
              f"{w[0]['imbalance_kg_s']:8.2f} {w[0]['mdl_kg_s']:6.2f} {w[1]['imbalance_kg_s']:8.2f} "
              f"{w[1]['mdl_kg_s']:6.2f} {leak:>9} {loc:>10}")
    print()
    events = [json.loads(line) for line in open(events_path)]
    print(f"Alarm events ({len(events)}):")
    for e in events:
        extra = ""
        if e["type"] in ("leak", "rupture") and e["leak_rate_kg_s"] is not None:
            extra = f" rate {e['leak_rate_kg_s']:.2f} kg/s"
            if e["location_m"] is not None:
                extra += f" at chainage {e['location_m']:.0f} m"
        print(f"  #{e['seq']:<3} {e['time'][:19]} {e['segment']} {e['type']:<20} {e['from']} -> {e['state']}"
              f" ({e['cause']}){extra}")
    try:
        truth = json.load(open(truth_path))
        leak = truth["leak"] if "leak" in truth else truth["leaks"][0]
        print()
        print("Ground truth of the invented demo data: " + json.dumps(leak))
    except (OSError, KeyError, IndexError, ValueError):
        pass


if __name__ == "__main__":
    main(*sys.argv[1:4])
