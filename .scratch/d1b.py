exec(open(".scratch/d1.py").read().split("sc=sc3()")[0])
from exomap.core.manifold import Manifold
sc=sc3(); mf=Manifold(sc)
tau=37.72579937783821
Ts=np.linspace(300,700,41)
cold=mf.general_eval(np.full(Ts.shape,tau),Ts)
for T,xc in zip(Ts,cold.xi):
    p=mf.evaluate(np.array([tau]),np.array([T]))
    d=np.max(np.abs(p.xi[0]-xc))
    if d>1e-6*10000: print(T, xc, p.xi[0], p.T_in[0]-cold.T_in[list(Ts).index(T)])
print("indep")
R=8.314462618
for T in [300, 400, 500, 550,600,700]:
    k=[r.k0*math.exp(-r.Ea/(R*T)) for r in sc.reactions]
    # 2 tau k3 CA^2 + (1+tau k1) CA - cin = 0
    a=2*tau*k[2]; b=1+tau*k[0]; c=-10000.
    CA=(-b+math.sqrt(b*b-4*a*c))/(2*a) if a>0 else -c/b
    CA = 2*(-c)/(b+math.sqrt(b*b-4*a*c))
    CB=tau*k[0]*CA/(1+tau*k[1])
    xi=[tau*k[0]*CA, tau*k[1]*CB, tau*k[2]*CA**2]
    print(T, xi, mf.general_eval(np.array([tau]),np.array([float(T)])).xi[0])
