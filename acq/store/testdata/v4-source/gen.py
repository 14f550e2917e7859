# Raw recording of an exact tanh loop (B = Bs·tanh((H ± Hc)/a)) with a constant
# integrator offset: t (s), I (A), psi (V·s). Written once to make
# acq/store/testdata/v4.db with the schema-4 build.
import math
bs, hc, a, hm = 1.5, 100.0, 50.0, 1000.0
n1, l, n2, A = 100, 0.1, 50, 50e-6
vos, psi0, dt, per, hold = 20e-6, 3e-4, 0.005, 200, 40
k = 0
print("t,I,psi,phase")
def row(h, d, ph):
    global k
    t = k*dt; k += 1
    b = bs*math.tanh((h+hc)/a) if d < 0 else bs*math.tanh((h-hc)/a)
    print("%r,%r,%r,%s" % (t, h*l/n1, psi0 + n2*A*b + vos*t, ph))
for _ in range(hold): row(0, -1, "pre")
def seg(f, to, d):
    n = round(abs(to-f)/hm*per)
    for j in range(1, n+1): row(f+(to-f)*j/n, d, "sweep")
seg(0, -hm, -1); seg(-hm, hm, 1); seg(hm, -hm, -1); seg(-hm, 0, 1)
for _ in range(hold): row(0, 1, "post")
