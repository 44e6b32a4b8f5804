from CoolProp.CoolProp import PropsSI
from ht.conv_free_immersed import Nu_vertical_plate_Churchill, Nu_horizontal_plate_McAdams
from fluids.core import Grashof, Reynolds
from scipy.optimize import brentq
import scipy.constants as C
sigma=C.Stefan_Boltzmann
print("sigma", sigma, "g", C.g)
def air(T):
    k=PropsSI('L','T',T,'P',101325,'Air'); mu=PropsSI('V','T',T,'P',101325,'Air'); rho=PropsSI('D','T',T,'P',101325,'Air'); Pr=PropsSI('Prandtl','T',T,'P',101325,'Air')
    return k, mu, rho, Pr
def hconv(Ts, Tinf, L, orient='v', wind=None):
    Tk=Ts+273.15; Ti=Tinf+273.15; Tf=(Tk+Ti)/2
    k,mu,rho,Pr=air(Tf)
    Gr=Grashof(L, 1/Tf, Tk, Ti, rho=rho, mu=mu)
    if orient=='v': Nu=Nu_vertical_plate_Churchill(Pr,Gr)
    elif orient=='up': Nu=Nu_horizontal_plate_McAdams(Pr,Gr,buoyancy=(Tk>Ti))
    else: Nu=Nu_horizontal_plate_McAdams(Pr,Gr,buoyancy=(Tk<Ti))
    hN=Nu*k/L
    if wind is None: return hN
    Re=rho*wind*L/mu
    NuF = 0.664*Re**0.5*Pr**(1/3) if Re<=5e5 else (0.037*Re**0.8-871)*Pr**(1/3)
    hF=NuF*k/L
    return (hF**3+hN**3)**(1/3)
def hrad(Ts,Tsur,eps):
    a=Ts+273.15;b=Tsur+273.15
    return eps*sigma*(a*a+b*b)*(a+b)
for Ts in (150,80,10,300):
    hc=hconv(Ts,25,2.0); hr=hrad(Ts,25,0.8)
    print("vert",Ts, round(hc,4), round(hr,4), round(hc*(Ts-25)+hr*(Ts-25),2))
for o in ('up','down'):
  for Ts in (120,60,10):
    for L in (0.05, 0.8):
      hc=hconv(Ts,25,L,o); print(o,Ts,L, round(hc,4))
for w in (1.0, 5.0):
    hc=hconv(120,25,2.0,'v',w); print("wind",w, round(hc,4))
# three-layer wall
R=0.23/1.3+0.115/0.17+0.01/50
def f(Ts):
    q=(1200-Ts)/R
    return q-(hconv(Ts,25,2.0)+hrad(Ts,25,0.8))*(Ts-25)
Ts=brentq(f,25.0001,1199)
q=(1200-Ts)/R
print("wall Ts",Ts,"q",q,"T1",1200-q*0.23/1.3,"T2",1200-q*(0.23/1.3+0.115/0.17))
