"""Coverage of `latens infer` on the demo scenario over survey noise seeds:
reads the directory tests/coverage/demo_seeds.sh wrote (argument 1) and
tells, per seed, whether the true place lies in the 50% and 90% regions
(mocpy reads the MOCs) and where the true mass falls in the posterior."""
import csv, json, glob, re, math, sys, os
from mocpy import MOC
import astropy.units as u
import numpy as np

root = sys.argv[1] if len(sys.argv) > 1 else 'output/demo-seeds'
rows = []
for d in sorted(glob.glob(os.path.join(root, 'inf*/summary.json')), key=lambda p: int(re.findall(r'inf(\d+)', p)[0])):
    seed = int(re.findall(r'inf(\d+)', d)[0])
    s = json.load(open(d))
    t = json.load(open(os.path.join(root, f'sim{seed}/truth.json')))
    at = t['perturber']['at_search_epoch']
    assert at['epoch_utc'][:16] == s['search_epoch_utc'][:16], (at['epoch_utc'], s['search_epoch_utc'])
    out = {}
    for lev in (50, 90):
        moc = MOC.from_json(json.load(open(os.path.join(root, f'inf{seed}/region{lev}.json'))))
        out[lev] = bool(moc.contains_lonlat(at['ra_deg'] * u.deg, at['dec_deg'] * u.deg)[0])
    m = np.array([float(r['mass_earth']) for r in csv.DictReader(open(os.path.join(root, f'inf{seed}/posterior.csv')))])
    q = np.quantile(m, [0.05, 0.25, 0.5, 0.75, 0.95])
    truth_m = t['perturber']['mass_earth']
    rank = float((m < truth_m).mean())
    rows.append((seed, s['detection']['detected'], round(s['detection']['delta_chi2'], 1), out[50], out[90],
                 round(s['sky']['area90_deg2']), round(q[2], 1), round(q[0], 1), round(q[4], 1), round(rank, 3),
                 s['diagnostics'].get('converged'), s.get('nonlinear_stage') is not None))
print('seed detected dchi2 in50 in90 area90 mass_med mass5 mass95 truth_rank converged recentred')
for r in rows:
    print(*r)
n = len(rows)
print(f'in 50%: {sum(r[3] for r in rows)}/{n}, in 90%: {sum(r[4] for r in rows)}/{n}; '
      f'mass truth in 50% interval: {sum(0.25 <= r[9] <= 0.75 for r in rows)}/{n}, in 90%: {sum(0.05 <= r[9] <= 0.95 for r in rows)}/{n}')
