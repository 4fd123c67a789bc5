"""Print the ED validation numbers (the same checks as tests/test_ed_*.py, with values).

    python benchmarks/validate_ed.py
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from _ed_dense import dense_hamiltonian, heisenberg_ring  # noqa: E402

from phasemap import Model  # noqa: E402
from phasemap.ed import chain, ground_state, solve_ed  # noqa: E402


def main():
    T = 1.0
    ring = Model("triangular", t=(T, 0, 0), V=(2 * T, 0, 0))
    print("Heisenberg ring from hard-core bosons with V = 2t (E_H = E_b/2t - L/4) vs dense kron:")
    for L in (4, 6, 8, 10):
        eb = ground_state(ring, chain("triangular", L), L // 2).e0
        ed = np.linalg.eigvalsh(heisenberg_ring(L))[0]
        print(f"  L={L:2d}  E_H(ED)={eb / (2 * T) - L / 4:.12f}  E_H(dense)={ed:.12f}  diff={eb / 2 - L / 4 - ed:.1e}")
    e_inf = 0.25 - math.log(2)
    es = {}
    for L in (12, 14, 16, 18, 20):
        es[L] = (ground_state(ring, chain("triangular", L), L // 2).e0 / (2 * T) - L / 4) / L
        print(f"  L={L:2d}  e(L)={es[L]:.8f}")
    ext = (es[20] * 400 - es[18] * 324) / (400 - 324)
    print(f"  1/L^2 extrapolation (18, 20): {ext:.6f}; Hulthen 1/4 - ln 2 = {e_inf:.6f}; diff {ext - e_inf:.1e}")

    print("V = 0 hard-core, tri12, t = (1, 0.6, 0.3), mu = 0.1, vs dense (occupation basis):")
    t = (1.0, 0.6, 0.3)
    m = Model("triangular", t=t, V=0, mu=0.1)
    for N in (3, 6):
        ref = np.linalg.eigvalsh(dense_hamiltonian("triangular", ((2, 2), (-2, 4)), N, t, (0, 0, 0), mu=0.1))[0]
        print(f"  N={N}  ED={ground_state(m, 'tri12', N).e0:.12f}  dense={ref:.12f}")

    print("Particle-hole, tri21, t=(0.2,0.3,0.25), V=(1,0.8,1.2), V2=0.3, mu=0.4:")
    m = Model("triangular", t=(0.2, 0.3, 0.25), V=(1.0, 0.8, 1.2), V2=0.3, mu=0.4)
    W = sum(m.V) + 3 * m.V2
    for N in (3, 7):
        d = ground_state(m, "tri21", 21 - N).e0 - ground_state(m, "tri21", N).e0
        print(f"  N={N}: E0(L-N)-E0(N)={d:.12f}  (L-2N)(W-mu)={(21 - 2 * N) * (W - m.mu):.12f}")

    print("Twist stiffness and S(K):")
    s = solve_ed(Model("triangular", t=0, V=1), cluster="tri12", particles=4)
    print(f"  t=0, tri12, N=4: S(K)/N={s.order['S(K)/N']:.12f} (1/9={1 / 9:.12f}), stiffness={s.order['stiffness']:.1e}, "
          f"gap={s.order['gap']:.6f} (3V)")
    s = solve_ed(Model("triangular", t=(1.0, 0.5, 0.2), V=0), cluster="tri12", particles=1, neighbors=False)
    print(f"  one boson, t=(1,0.5,0.2): rho_d1={s.order['stiffness_d1']:.10f} exact {2 / 12 * (1 + 0.5 / 4 + 0.2 / 4):.10f}; "
          f"condensate fraction {s.order['condensate_fraction']:.12f}")
    s = solve_ed(Model("triangular", t=(1.0, 0.5, 0.5), V=0), cluster="tri12", particles=6, neighbors=False)
    print("  V=0, half filling, t=(1,0.5,0.5): " + ", ".join(f"rho_{f}={s.order['stiffness_' + f]:.6f}" for f in ("d1", "d2", "d3"))
          + f", f_c={s.order['condensate_fraction']:.4f}, phase={s.phase}")
    for name, N in (("tri12", 4), ("tri21", 7), ("tri27", 9)):
        s = solve_ed(Model("triangular", t=0.1, V=1), cluster=name, particles=N, observables=("sq", "stiffness"))
        print(f"  t/V=0.1 n=1/3 {name}: S(K)/N={s.order['S(K)/N']:.5f}, rho={s.order['stiffness']:.5f}, "
              f"gap={s.order['gap']:.5f}, phase={s.phase}")


if __name__ == "__main__":
    main()
