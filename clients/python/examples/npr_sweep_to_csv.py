"""Jet state and screech map of a nozzle over an NPR sweep, written to CSV.

    python npr_sweep_to_csv.py OUT.csv [--server HOST:PORT] [--diameter-m 0.0254]

Columns: npr, fully_expanded_mach_number, fully_expanded_velocity_m_per_s, powell_hz,
tam_1986_hz, loop_n1_hz .. loop_n4_hz (empty where the jet is not supersonic).
"""
import argparse
import csv
import math

from jetloop_client import Client

p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
p.add_argument("out")
p.add_argument("--server", default="127.0.0.1:50051")
p.add_argument("--diameter-m", type=float, default=0.0254)
p.add_argument("--from-npr", type=float, default=1.5)
p.add_argument("--to-npr", type=float, default=6.0)
p.add_argument("--count", type=int, default=46)
a = p.parse_args()

nprs = [a.from_npr + (a.to_npr - a.from_npr) * k / (a.count - 1) for k in range(a.count)]
with Client(a.server) as c:
    sweep = c.sweep_screech(nprs, diameter_m=a.diameter_m, nozzle_pressure_ratio=nprs[0], max_loop_order=4)
    states = [c.jet_state(a.diameter_m, nozzle_pressure_ratio=n) for n in nprs]

def cell(v):
    return "" if v is None or (isinstance(v, float) and math.isnan(v)) else f"{v:.6g}"

with open(a.out, "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["npr", "fully_expanded_mach_number", "fully_expanded_velocity_m_per_s", "powell_hz", "tam_1986_hz",
                "loop_n1_hz", "loop_n2_hz", "loop_n3_hz", "loop_n4_hz"])
    for k, n in enumerate(nprs):
        s = states[k]
        mj = s.fully_expanded_mach_number if s.HasField("fully_expanded_mach_number") else None
        uj = s.fully_expanded_velocity_m_per_s if s.HasField("fully_expanded_velocity_m_per_s") else None
        loops = list(sweep["loop_hz"][k]) if sweep["loop_hz"].size else [None] * 4
        w.writerow([cell(n), cell(mj), cell(uj), cell(sweep["powell_hz"][k]), cell(sweep["tam_1986_hz"][k]),
                    *[cell(v) for v in loops[:4]]])
print(f"wrote {a.count} NPR points to {a.out}")
