"""Monte Carlo coverage of the extinction uncertainty on simulated bistatic campaigns (prints figures; not a test).

Usage: python tests/benchmarks/bench_bistatic_coverage.py SEEDS   (about 3 s per seed)
GUM honesty test (README, Bistatic and forward scattering): about 95 % of results within +/- U and
RMS(error / u) near 1.
"""
import sys, tomllib, json, numpy as np, pandas as pd, tempfile
from pathlib import Path
from cloakrcs.simulate import simulate_campaign
from cloakrcs.campaign import load_campaign
from cloakrcs.process import process_campaign
cfg0=tomllib.loads((Path(__file__).resolve().parents[2] / 'sample_measurements' / 'bistatic_config.toml').read_text())
cfg0["angles"]={"start":0.0,"stop":315.0,"step":45.0}; cfg0["arm"]["bistatic"]=[60.0,120.0,180.0]
mode=sys.argv[2] if len(sys.argv) > 2 else "noisy"; n=int(sys.argv[1]) if len(sys.argv) > 1 else 20
res=[]
for seed in range(n):
    cfg=json.loads(json.dumps(cfg0,default=str)); cfg["seed"]=seed+1
    cfg["campaign"]["date"]=cfg0["campaign"]["date"]
    [t.__setitem__("repeats",8) for t in cfg["target"] if t["name"]=="arm-empty"]
    if mode=="clean": cfg["noise"]["level_db"]=-300.0; cfg["drift"]={"amplitude_db":0.0,"phase_deg":0.0}
    d=tempfile.mkdtemp()
    sim=simulate_campaign(cfg,d)
    r=process_campaign(load_campaign(sim.manifest_path))
    s=r.arm.summary
    truth=pd.read_csv(Path(d)/'truth'/'extinction.csv'); lo,hi=s['reporting_band_hz']
    for e in s['extinction']:
        t=truth[(truth.target==e['target'])&(truth.polarization==e['polarization'])&(truth.frequency_hz>=lo-1)&(truth.frequency_hz<=hi+1)]
        err=10*np.log10(e['band_mean_m2']/t.extinction_m2.mean())
        res.append((e["target"],e["polarization"],err,e["budget"]["combined"],e["budget"]["coverage_k"]))
df=pd.DataFrame(res,columns=["t","p","err","u","k"])
df['z']=df.err/df.u
print(df.groupby(['t','p']).agg(bias=('err','mean'),rms=('err',lambda x: np.sqrt(np.mean(x**2))),u=('u','mean'),zrms=('z',lambda x: np.sqrt(np.mean(x**2)))))
print('coverage k=2', np.mean(np.abs(df.z)<=2), 'coverage k=t', np.mean(np.abs(df.z)<=df.k), 'mean k', df.k.mean(), 'zrms', np.sqrt(np.mean(df.z**2)))
