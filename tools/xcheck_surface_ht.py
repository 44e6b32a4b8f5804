import CoolProp, ht, fluids
from CoolProp.CoolProp import PropsSI
import inspect
print("CoolProp", CoolProp.__version__, "ht", ht.__version__, "fluids", fluids.__version__)
def air(T):
    k=PropsSI('L','T',T,'P',101325,'Air'); mu=PropsSI('V','T',T,'P',101325,'Air'); rho=PropsSI('D','T',T,'P',101325,'Air'); Pr=PropsSI('Prandtl','T',T,'P',101325,'Air')
    return k, mu/rho, Pr
for T in (325,350,400,475,725):
    print(T, ["%.5g"%v for v in air(T)])
print(ht.conv_free_immersed.Nu_vertical_plate_Churchill(0.69, 2.63e9))
print(inspect.getsource(ht.conv_free_immersed.Nu_horizontal_plate_McAdams))
