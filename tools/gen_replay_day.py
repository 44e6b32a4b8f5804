"""A day of 64 channels at 1 Hz (8 zones of 8 probes) for timing `wallflux
analyze` (BENCHMARKS.md). Writes /tmp/day64.toml and /tmp/day64.csv
(about 130 MB). Synthetic data for a measurement, not a physics check."""
import math

depths = [20, 60, 100, 140, 180, 220, 260, 300]
with open('/tmp/day64.toml', 'w') as f:
    f.write('[site]\nplant="p"\nkiln="k"\n[mqtt]\nhost="127.0.0.1"\n[[source]]\nname="box"\nkind="line"\nport="/dev/null"\n')
    f.write('[[material]]\nname="m"\nconductivity_w_mk=[[200.0,1.0],[1200.0,1.3]]\ndensity_kg_m3=2000.0\nspecific_heat_j_kgk=1000.0\n')
    for z in range(8):
        for p in range(8):
            f.write(f'[[channel]]\nname="z{z}p{p}"\nsource="box"\ninput={z*8+p+1}\ntype="K"\n')
    for z in range(8):
        probes = ",".join(f'{{channel="z{z}p{p}",depth_mm={d}}}' for p, d in enumerate(depths))
        f.write(f'[[zone]]\nname="z{z}"\narea_m2=5.0\nmodel="quadratic"\ninterval_s=10\n'
                f'layers=[{{material="m",thickness_mm=300}}]\nprobes=[{probes}]\n')
with open('/tmp/day64.csv', 'w') as f:
    f.write('time,channel,value\n')
    t0 = 1800000000
    for s in range(86400):
        base = 800 + 200 * math.sin(s / 20000)
        for z in range(8):
            for p, d in enumerate(depths):
                f.write(f'{t0+s},z{z}p{p},{base-2.2*d+0.001*d*d+0.05*math.sin(s*0.7+p):.2f}\n')
