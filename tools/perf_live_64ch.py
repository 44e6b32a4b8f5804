"""64 channels at 1 Hz into the real daemon over a pseudo-terminal, with the
embedded broker; prints the daemon's CPU time and resident memory
(BENCHMARKS.md). Run from a directory holding base.toml (tools/gen_replay_day.py
makes one; set its source port to PTY, [mqtt] port 18855, interval_s = 1 and
a state_dir) after `cargo build --release`: python3 perf_live_64ch.py 60.
WALLFLUX_BIN names another daemon binary (e.g. target/production/wallflux);
the broker is mosquitto when installed, else the release build's embedded one."""
import os, sys, time, math, tty, subprocess, re, shutil
def crc(b):
    c=0xFFFF
    for x in b:
        c^=x<<8
        for _ in range(8):
            c=((c<<1)^0x1021)&0xFFFF if c&0x8000 else (c<<1)&0xFFFF
    return c
m,s=os.openpty(); tty.setraw(s); path=os.ttyname(s)
cfg=open('base.toml').read().replace('PTY',path); open('run.toml','w').write(cfg)
BIN=os.environ.get('WALLFLUX_BIN','/work/main/target/release/wallflux')
if shutil.which('mosquitto'):
    br=subprocess.Popen(['mosquitto','-p','18855'],stderr=subprocess.DEVNULL)
else:
    br=subprocess.Popen(['/work/main/target/release/wallflux','broker','--port','18855'],stderr=subprocess.DEVNULL)
time.sleep(0.5)
d=subprocess.Popen([BIN,'run','--config','run.toml'],stderr=open('d.log','w'))
depths=[20,60,100,140,180,220,260,300]
seq=0; t0=time.time(); dur=int(sys.argv[1])
while time.time()-t0<dur:
    s_=time.time()-t0
    for part in range(4):
        vals=[]
        for k in range(16):
            i=part*16+k; z,p=divmod(i,8); dd=depths[p]
            vals.append(f"{i+1}={800-2.2*dd+0.001*dd*dd+0.05*math.sin(s_*0.7+p):.2f}C")
        body=f"#{seq} "+" ".join(vals)
        line=f"{body} *{crc(body.encode()):04X}\n"
        os.write(m,line.encode()); seq+=1
    time.sleep(1.0)
st=open(f'/proc/{d.pid}/stat').read().split(); ut,stt=int(st[13]),int(st[14])
rss=[l for l in open(f'/proc/{d.pid}/status') if l.startswith('VmRSS')][0].strip()
print("cpu_s",(ut+stt)/os.sysconf('SC_CLK_TCK'),"over",dur,"s;",rss)
d.terminate(); d.wait(); br.terminate()
