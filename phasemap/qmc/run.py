r"""Front door of quantum Monte Carlo: ``run_qmc(model, cluster=... | size=..., T=...) -> QMCResult``.

One *chain* is one Markov chain: random start, ``thermalization`` sweeps (the operator-string
cut-off grows and the number of loops per sweep is tuned), then ``sweeps`` measured sweeps cut
into ``bins`` equal bins. Chains are independent (seeds ``(seed, chain)``), run in parallel
processes, and their bins are pooled for the errors. A chain can checkpoint its complete
state (configuration, random state, accumulated measurements) atomically and resume after
being killed; with the same seed the result is identical to an uninterrupted run.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import time
from dataclasses import dataclass, field

import numpy as np

from ..model import ConfigError, Model
from . import kernel
from .geometry import Graph, torus
from .stats import Estimate, estimate, vector_estimate
from .tempering import ladder_points, log_weights, positive, pt_block

__all__ = ["run_qmc", "QMCResult", "run_graph", "GROUND_STATE"]

#: Ground-state search: start at beta = beta0 / max(t, V) ... doubled up to beta_max (see docs).
GROUND_STATE = {"beta0": 4.0, "beta_max": 256.0, "nsigma": 2.0}


# ----------------------------------------------------------------------------- one chain
def _graph_key(g: Graph) -> dict:
    return {"bonds": g.bonds.tolist(), "types": [{k: v for k, v in ty.items()} for ty in g.types],
            "bond_type": g.bond_type.tolist()}


def _job_hash(job: dict, g: Graph) -> str:
    d = {k: v for k, v in job.items() if k not in ("graph", "checkpoint", "interval", "ladder")}
    d["graph"] = _graph_key(g)
    if job.get("ladder"):
        d["ladder"] = [_graph_key(x) for x in job["ladder"]]
    return hashlib.sha256(json.dumps(d, sort_keys=True, default=str).encode()).hexdigest()[:20]


def _save(path: str, arrays: dict) -> None:
    """Atomic write: temporary file in the same folder, fsync, rename."""
    tmp = f"{path}.tmp{os.getpid()}"
    with open(tmp, "wb") as fh:
        np.savez(fh, **arrays)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


def _beta_hot(g: Graph) -> float:
    """Inverse temperature where the warm-up starts: 1 / (largest bond shift C), hot enough for
    the particle number and the density pattern of a random start to equilibrate quickly."""
    return 1.0 / max(max(float(ty["C"]) for ty in g.types), 1e-12)


def anneal_beta(beta: float, beta_hot: float, k: int, therm: int) -> float:
    """Inverse temperature of warm-up sweep ``k`` of ``therm``: geometric from ``beta_hot`` to
    ``beta`` over the first half of the warm-up, then ``beta``.

    Why: from a random start at low T the particle number can freeze in a wrong sector (its
    changes need loops that cost the finite-size charge gap; measured: a 12x12 torus at
    t/V = 0.08, half filling, beta V = 250 stayed at 73 particles for 4000 sweeps, energy
    5e-3 V too high). Cooling from beta_hot lets N and the solid domains settle while they
    still fluctuate (simulated annealing; common practice, no source).
    """
    ramp = therm // 2
    if beta <= beta_hot or k >= ramp or ramp <= 0:
        return beta
    return beta_hot * (beta / beta_hot) ** (k / ramp)


#: per-slot arrays of a chain's state (leading axis = replica slot); a single-replica checkpoint
#: stores them without that axis (the format of runs without replica exchange)
_SLOT_KEYS = ("ops", "state", "rng", "nloops", "tune_visits", "tune_loops", "rec", "sq_bins", "sq_acc",
              "flip_therm", "flip_meas", "sector_moves")


def _load_state(path, key, R):
    if not (path and os.path.exists(path)):
        return None
    with np.load(path) as z:
        if str(z["key"]) != key:
            return None
        st = {k: z[k].copy() for k in z.files}
    st.setdefault("sector_moves", np.zeros((), np.int64) if R == 1 else np.zeros(R, np.int64))  # older files
    if R == 1:
        for k in _SLOT_KEYS:
            st[k] = st[k][None]
    return st


def _disk_state(st, R):
    return st if R > 1 else {k: (v[0] if k in _SLOT_KEYS else v) for k, v in st.items()}


def _chain(job: dict) -> dict:
    """Run one chain to the end (resuming from its checkpoint file if present).

    With ``job["ladder"]`` and ``job["betas"]`` (graphs of the same torus at several mu and their
    inverse temperatures, ``job["target"]`` the index of ``job["graph"]``, ``job["beta"]``) the
    chain is a replica-exchange chain (``phasemap.qmc.tempering``):
    every slot is swept, neighbouring slots exchange configurations; the returned ``rec`` and
    ``sq_bins`` are those of the target slot, ``replicas`` holds every slot's.
    """
    g: Graph = job["graph"]
    ladder = job.get("ladder") or [g]
    betas = np.array(job.get("betas") or [job["beta"]], float)
    tgt = int(job.get("target", 0))
    R = len(ladder)
    sweeps, therm, bins, nslice = job["sweeps"], job["thermalization"], job["bins"], job["slices"]
    N = g.n_sites
    key = _job_hash(job, g)
    canon = job.get("particles") is not None
    path = job.get("checkpoint")
    interval = job.get("interval", 5.0)
    qr = 2 * np.pi * (g.sites @ g.momenta.T) if len(g.momenta) else np.zeros((N, 0))
    cosq, sinq = np.ascontiguousarray(np.cos(qr)), np.ascontiguousarray(np.sin(qr))
    kidx = g.k_index
    Nq = cosq.shape[1]
    st = _load_state(path, key, R)
    if st is None:
        init = np.random.default_rng([int(job["seed"]), int(job["chain"]), 7])
        M0 = max(16, int(1.5 * N))
        if canon:  # fixed particle number: a random arrangement of exactly that many particles
            state0 = [(init.permutation(N) < job["particles"]).astype(np.int64) for _ in range(R)]
        else:
            state0 = [init.integers(0, 2, N).astype(np.int64) for _ in range(R)]
        st = {
            "key": np.array(key), "ops": np.full((R, M0), -1, np.int64), "state": np.array(state0),
            "rng": np.array([kernel.seed_state(job["seed"], job["chain"] + 1000003 * r) for r in range(R)]),
            "nloops": np.ones(R, np.int64), "therm_done": np.array(0),
            "tune_visits": np.zeros(R), "tune_loops": np.zeros(R), "meas_done": np.array(0),
            "rec": np.zeros((R, sweeps, kernel.NREC)), "sq_bins": np.zeros((R, bins, Nq)), "sq_acc": np.zeros((R, Nq)),
            "visits": np.array(0), "elapsed": np.array(0.0), "meas_seconds": np.array(0.0),
            "flip_therm": np.zeros((R, 2), np.int64), "flip_meas": np.zeros((R, 2), np.int64),
            "sector_moves": np.zeros(R, np.int64),
            "swap_rng": kernel.seed_state(job["seed"], job["chain"] + 7777777), "counter": np.zeros(1, np.int64),
            "walker": np.arange(R, dtype=np.int64), "swap_therm": np.zeros((max(R - 1, 0), 2), np.int64),
            "swap_meas": np.zeros((max(R - 1, 0), 2), np.int64),
        }
        if R == 1:  # the checkpoint format of a single chain is unchanged
            for k in ("swap_rng", "counter", "walker", "swap_therm", "swap_meas"):
                del st[k]
    ops, state, rng = st["ops"], st["state"], st["rng"]
    if R == 1:
        st_swap = {"swap_rng": np.zeros(4, np.uint64), "counter": np.zeros(1, np.int64),
                   "walker": np.zeros(1, np.int64), "swap_therm": np.zeros((0, 2), np.int64),
                   "swap_meas": np.zeros((0, 2), np.int64)}
    else:
        st_swap = st
    flip_therm, flip_meas = st["flip_therm"], st["flip_meas"]  # particle-hole flips: attempts, accepted
    do_flip = bool(job.get("ph_flip", True)) and (not canon or 2 * job["particles"] == N)
    wtab = np.ascontiguousarray([x.wtab for x in ladder])
    cum = np.ascontiguousarray([x.cum for x in ladder])
    lflip = np.ascontiguousarray([kernel.flip_table(x.wtab) for x in ladder])
    lw = np.ascontiguousarray([log_weights(x.wtab) for x in ladder])
    cnt = np.zeros(wtab.shape, np.int64)
    tmp = np.zeros(N, np.int64)
    nloops = st["nloops"]
    nops, visits = np.zeros(R, np.int64), np.zeros(R, np.int64)
    t_start, last_save = time.perf_counter(), time.perf_counter()
    elapsed0 = float(st["elapsed"])

    def work(M):
        return (np.zeros(4 * M, np.int64), np.zeros(M, np.int64), np.zeros(M, np.int64), np.zeros(M, np.int64),
                np.zeros(N, np.int64), np.zeros(N, np.int64))

    X, vtx, vty, opidx, first, last = work(ops.shape[1])
    dummy_rec = np.zeros((R, 1, kernel.NREC))
    dummy_sq = np.zeros((R, Nq))

    smoves = st["sector_moves"]
    smoves_dummy = np.zeros(R, np.int64)

    def block(k, measure, row0, sq, rc, flipc, swapc):
        visits[:] = 0
        pt_block(k, ops, state, g.bonds, g.bond_type, g.bond_vec, wtab, cum, betas_now, nloops, rng,
                 X, vtx, vty, opidx, first, last, cosq, sinq, kidx, nslice, sq, rc, row0, measure,
                 lflip, do_flip, flipc, lw, cnt, tmp, st_swap["swap_rng"], swapc, st_swap["walker"],
                 st_swap["counter"], nops, visits, smoves if measure else smoves_dummy, canon)

    def checkpoint(force=False):
        nonlocal last_save
        if path and (force or time.perf_counter() - last_save > interval):
            st.update(ops=ops, state=state, rng=rng, nloops=nloops,
                      elapsed=np.array(elapsed0 + time.perf_counter() - t_start))
            _save(path, _disk_state(st, R))
            last_save = time.perf_counter()

    # -- thermalization: anneal, grow the cut-off (all slots together), tune the loops per sweep
    beta_hot = min(_beta_hot(x) for x in ladder)
    while int(st["therm_done"]) < therm:
        betas_now = np.array([anneal_beta(b, beta_hot, int(st["therm_done"]), therm) for b in betas])
        block(1, False, 0, dummy_sq, dummy_rec, flip_therm, st_swap["swap_therm"])
        n = int(nops.max())
        M = ops.shape[1]
        if n + n // 3 + 4 > M:
            Mn = n + n // 3 + 4
            ops = np.concatenate([ops, np.full((R, Mn - M), -1, np.int64)], axis=1)
            X, vtx, vty, opidx, first, last = work(Mn)
        st["tune_visits"] = st["tune_visits"] + visits
        st["tune_loops"] = st["tune_loops"] + nloops
        for r in range(R):
            if st["tune_visits"][r] > 0:
                per_loop = float(st["tune_visits"][r]) / float(st["tune_loops"][r])
                nloops[r] = int(min(max(1, round(ops.shape[1] / per_loop)), 10 * ops.shape[1] + 10))
        st["therm_done"] = st["therm_done"] + 1
        if int(st["therm_done"]) == therm // 2:  # forget the early (far from equilibrium) loop lengths
            st["tune_visits"], st["tune_loops"] = np.zeros(R), np.zeros(R)
        checkpoint()
    # -- measurement in equal bins
    betas_now = betas
    per_bin = sweeps // bins
    rec, sq_bins, sq_acc = st["rec"], st["sq_bins"], st["sq_acc"]
    chunk = 1
    while int(st["meas_done"]) < sweeps:
        done = int(st["meas_done"])
        b = min(done // per_bin, bins - 1)
        bin_end = (b + 1) * per_bin if b < bins - 1 else sweeps
        k = min(chunk, bin_end - done)
        t0, c0 = time.perf_counter(), time.process_time()
        block(k, True, done, sq_acc, rec, flip_meas, st_swap["swap_meas"])
        dt = time.perf_counter() - t0
        st["meas_cpu"] = st.get("meas_cpu", np.array(0.0)) + (time.process_time() - c0)
        chunk = max(1, min(chunk * 2, 1 << 20)) if dt < 0.25 else max(1, chunk // 2)
        st["visits"] = st["visits"] + int(visits.sum())
        st["meas_seconds"] = st["meas_seconds"] + dt
        st["meas_done"] = np.array(done + k)
        if done + k == bin_end:
            sq_bins[:, b] = sq_acc / (bin_end - b * per_bin)
            sq_acc[:] = 0.0
        checkpoint()
    st["elapsed"] = np.array(elapsed0 + time.perf_counter() - t_start)
    checkpoint(force=True)
    out = {"rec": rec[tgt].copy(), "sq_bins": sq_bins[tgt].copy(), "M": ops.shape[1], "nloops": int(nloops[tgt]),
           "visits": int(st["visits"]), "elapsed": float(st["elapsed"]), "thermalization": therm,
           "meas_seconds": float(st["meas_seconds"]),
           "flip_attempts": int(flip_meas[tgt, 0]), "flip_accepted": int(flip_meas[tgt, 1]),
           "meas_cpu": float(st.get("meas_cpu", 0.0)), "mean_ops": float(rec[tgt, :, 0].mean()) if sweeps else 0.0,
           "max_ops": int(rec[:, :, 0].max()) if sweeps else 0, "sector_moves": smoves.tolist()}
    if R > 1:
        out.update(replicas=[{"rec": rec[r].copy(), "sq_bins": sq_bins[r].copy()} for r in range(R)],
                   swaps=st["swap_meas"].tolist(), walker=st["walker"].tolist(),
                   nloops_per_replica=nloops.tolist())
    return out


def _chain_entry(job):
    return _chain(job)


def _run_chains(jobs: list[dict], workers: int) -> list[dict]:
    if workers <= 1 or len(jobs) == 1:
        return [_chain(j) for j in jobs]
    from ..executor import process_pool

    with process_pool(workers, "spawn" if os.name == "nt" else "fork") as ex:
        return list(ex.map(_chain_entry, jobs))


# ----------------------------------------------------------------------------- result
@dataclass
class QMCResult:
    """Measured thermal averages of one QMC run (all chains pooled).

    Attributes
    ----------
    model : Model
    cluster : str
        Torus label ("tri12", "12x12", or the superlattice vectors).
    vectors : list
        Superlattice vectors of the torus in (i, j) coordinates (``Supercell(lattice, vectors)``).
    n_sites : int
    T, beta : float
        Temperature of the run (``T = 1/beta``, model energy unit).
    ground_state : bool
        True if beta was chosen by doubling (``T`` not given); ``betas`` lists every beta run.
    estimates : dict[str, Estimate]
        ``energy`` (<H>/N incl. -mu N), ``filling`` (<N_p>/N), ``compressibility``
        (beta (<N_p^2> - <N_p>^2)/N = d filling / d mu), ``S(K)/N`` (<|rho_K|^2>),
        ``binder`` (<|rho_K|^4>/<|rho_K|^2>^2), ``stiffness`` (mean over families),
        ``stiffness_<family>`` (twist along the unit vector of that bond family),
        ``stiffness_xx``, ``stiffness_yy``, ``stiffness_xy`` (Cartesian tensor), ``n_ops``.
    momenta : (Nq, 2) array; sq, sq_err : (Nq,) arrays
        S(Q)/N = <|rho_Q|^2> at every momentum of the torus and its one-sigma errors.
    decorrelated : bool
        False if energy, filling, compressibility, S(K)/N or stiffness is flagged, or the operator-string cut-off
        was reached during measurement (``flags`` says which).
    flags : list of str
    sweeps, thermalization, bins, chains, seed : run parameters.
    info : dict
        cut-off M and loops per sweep of every chain, vertex visits, wall time, table bounce
        probabilities, the shift C per bond type, ground-state search record.
    """

    model: Model
    cluster: str
    n_sites: int
    T: float
    beta: float
    ground_state: bool
    estimates: dict
    momenta: np.ndarray
    sq: np.ndarray
    sq_err: np.ndarray
    decorrelated: bool
    flags: list
    sweeps: int
    thermalization: int
    bins: int
    chains: int
    seed: int
    betas: list = field(default_factory=list)
    vectors: list | None = None
    info: dict = field(default_factory=dict)

    def __getitem__(self, name) -> Estimate:
        return self.estimates[name]

    @property
    def energy(self) -> Estimate:
        return self.estimates["energy"]

    @property
    def filling(self) -> Estimate:
        return self.estimates["filling"]

    def summary(self) -> str:
        lines = [f"model   : {self.model.describe()}",
                 f"torus   : {self.cluster} (N = {self.n_sites}), T = {self.T:.6g}, beta = {self.beta:.6g}"
                 + (" (ground state by beta doubling)" if self.ground_state else ""),
                 f"run     : {self.chains} chain(s) x {self.sweeps} sweeps ({self.bins} bins), "
                 f"{self.thermalization} thermalization sweeps, seed {self.seed}"]
        for k, e in self.estimates.items():
            lines.append(f"{k:<16s}: {e.value:.8g} ± {e.error:.2g}  (tau_int {e.tau:.3g})"
                         + ("" if e.decorrelated else "  NOT DECORRELATED"))
        if self.flags:
            lines.append("flags   : " + ", ".join(self.flags))
        return "\n".join(lines)

    def to_dict(self) -> dict:
        return {"model": self.model.to_dict(), "cluster": self.cluster, "vectors": self.vectors, "n_sites": self.n_sites, "T": self.T,
                "beta": self.beta, "ground_state": self.ground_state, "betas": list(self.betas),
                "estimates": {k: e.to_dict() for k, e in self.estimates.items()},
                "momenta": self.momenta.tolist(), "sq": self.sq.tolist(), "sq_err": self.sq_err.tolist(),
                "decorrelated": self.decorrelated, "flags": list(self.flags), "sweeps": self.sweeps,
                "thermalization": self.thermalization, "bins": self.bins, "chains": self.chains, "seed": self.seed,
                "info": json.loads(json.dumps(self.info, default=lambda o: np.asarray(o).tolist()))}

    def to_solution(self, thresholds=None):
        from .classify import to_solution

        return to_solution(self, thresholds)


# ----------------------------------------------------------------------------- analysis
#: estimates that decide the decorrelation flag of the run
_KEY_ESTIMATES = ("energy", "filling", "S(K)/N", "stiffness")
#: estimates that decide the decorrelation flag of the run: the key estimates and the particle-number
#: fluctuation. At a particle-hole-symmetric point the flip update mirrors N -> N_sites - N every sweep, so
#: the filling is exact there and blind to a frozen |N - N_sites/2| (chains stuck in different sectors,
#: measured: 12x12 at t/V = 0.08, beta V = 120, one chain at 71/73 and one at 72 particles for 64000 sweeps);
#: the compressibility (beta <(N - <N>)^2> / N) is the particle-hole-even observable that still sees it.
_DECORRELATION_KEYS = _KEY_ESTIMATES + ("compressibility",)


def analyze(g: Graph, outs: list[dict], beta: float, bins: int, canonical: bool = False
            ) -> tuple[dict, np.ndarray, np.ndarray]:
    """Estimates of the pooled chains; ``canonical`` (fixed particle number): the compressibility is
    not the N fluctuation of the ensemble (NaN, "not measured")."""
    N = g.n_sites
    basis = np.array([g.lattice.a1, g.lattice.a2])
    series = []
    for o in outs:
        r = o["rec"]
        W = r[:, 2:4] @ basis  # Cartesian winding displacement
        Np = r[:, 1]
        series.append(np.column_stack([r[:, 0], Np, Np * Np, W[:, 0] ** 2, W[:, 1] ** 2, W[:, 0] * W[:, 1],
                                       r[:, 4], r[:, 5]]))
    est = {}
    est["energy"] = estimate(series, bins, lambda m: (-m[0] / beta + g.shift) / N)
    est["filling"] = estimate(series, bins, lambda m: m[1] / N)
    est["compressibility"] = (Estimate(math.nan, math.nan, math.nan) if canonical
                              else estimate(series, bins, lambda m: beta * (m[2] - m[1] ** 2) / N))
    if g.k_index >= 0:
        est["S(K)/N"] = estimate(series, bins, lambda m: m[6])
        est["binder"] = estimate(series, bins, lambda m: m[7] / np.where(m[6] > 0, m[6] ** 2, np.nan))
    if g.cell is not None:
        D = g.lattice.cartesian(np.array(g.lattice.nn))
        fams = []
        for f, name in enumerate(g.lattice.families):
            e = D[f] / np.linalg.norm(D[f])
            fams.append((name, e))
        c = 1.0 / (beta * N)
        est["stiffness"] = estimate(series, bins, lambda m: c * np.mean(
            [e[0] ** 2 * m[3] + e[1] ** 2 * m[4] + 2 * e[0] * e[1] * m[5] for _, e in fams], axis=0))
        for name, e in fams:
            est[f"stiffness_{name}"] = estimate(
                series, bins, lambda m, e=e: c * (e[0] ** 2 * m[3] + e[1] ** 2 * m[4] + 2 * e[0] * e[1] * m[5]))
        est["stiffness_xx"] = estimate(series, bins, lambda m: c * m[3])
        est["stiffness_yy"] = estimate(series, bins, lambda m: c * m[4])
        est["stiffness_xy"] = estimate(series, bins, lambda m: c * m[5])
    est["n_ops"] = estimate(series, bins, lambda m: m[0])
    if len(g.momenta):
        sq, sq_err = vector_estimate([o["sq_bins"] for o in outs])
    else:
        sq, sq_err = np.zeros(0), np.zeros(0)
    return est, sq, sq_err


# ----------------------------------------------------------------------------- front door
def _check_int(name, v, lo):
    if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < lo:
        raise ConfigError(f"{name}: expected an integer >= {lo}, got {v!r}")
    return int(v)


def run_graph(g: Graph, beta: float, sweeps: int = 10000, thermalization: int | None = None, bins: int = 32,
              seed: int = 0, chains: int = 1, checkpoint: str | None = None, workers: int | None = None,
              slices: int = 4, checkpoint_interval: float = 5.0, ph_flip: bool = True, ladder=None,
              particles: int | None = None):
    """Run ``chains`` chains on a prepared :class:`~phasemap.qmc.geometry.Graph` at inverse
    temperature ``beta`` (``ph_flip``: attempt one particle-hole flip per sweep, see
    ``kernel``). ``particles``: sample at this fixed particle number (``kernel``, "Canonical
    sampling"; the flip only when it keeps N, i.e. ``2 particles = N_sites``). ``ladder``: ``[(graph, beta), ...]``, the same torus at several (mu, beta) with
    ``(g, beta)`` among them, for replica exchange (``phasemap.qmc.tempering``); the estimates are
    those of ``(g, beta)``.
    Returns ``(estimates, sq, sq_err, outs)``."""
    sweeps = _check_int("sweeps", sweeps, 1)
    bins = _check_int("bins", bins, 2)
    chains = _check_int("chains", chains, 1)
    slices = _check_int("slices", slices, 1)
    if sweeps < bins:
        raise ConfigError(f"sweeps: need at least one sweep per bin (sweeps >= bins = {bins}), got {sweeps}")
    thermalization = max(sweeps // 5, 100) if thermalization is None else _check_int("thermalization", thermalization, 0)
    extra = {}
    if particles is not None:
        particles = _check_int("fixed_filling (particles)", particles, 0)
        if particles > g.n_sites:
            raise ConfigError(f"fixed_filling: {particles} particles do not fit on {g.n_sites} sites")
        if ladder is not None and len(ladder) > 1:
            raise ConfigError("fixed_filling: replica exchange (replicas > 1) works in the grand-canonical "
                              "ensemble only; run at fixed particle number without replicas")
        extra["particles"] = particles
    if checkpoint is not None:
        os.makedirs(checkpoint, exist_ok=True)
    if ladder is not None and len(ladder) > 1:
        hit = [k for k, (x, b) in enumerate(ladder) if x is g and b == beta]
        if len(hit) != 1:
            raise ConfigError("ladder: must contain the run's (graph, beta) exactly once")
        for x, b in ladder:
            if not (b > 0 and math.isfinite(b)):
                raise ConfigError(f"ladder: inverse temperatures must be > 0 and finite, got {b}")
            if x.n_sites != g.n_sites or not np.array_equal(x.bonds, g.bonds) or \
                    not np.array_equal(x.bond_type, g.bond_type) or x.wtab.shape != g.wtab.shape:
                raise ConfigError("ladder: every replica must have the bonds and bond types of the run's torus")
        extra = {"ladder": [x for x, _ in ladder], "betas": [float(b) for _, b in ladder], "target": hit[0]}
    jobs = []
    for c in range(chains):
        jobs.append({"graph": g, "beta": float(beta), "sweeps": sweeps, "thermalization": thermalization,
                     "bins": bins, "seed": int(seed), "chain": c, "slices": slices, "interval": checkpoint_interval,
                     "ph_flip": bool(ph_flip), **extra,
                     "checkpoint": None if checkpoint is None else os.path.join(
                         checkpoint, f"{g.name}_beta{beta:.6g}_seed{seed}_chain{c}"
                         + (f"_rx{len(ladder)}" if "ladder" in extra else "")
                         + (f"_N{particles}" if particles is not None else "") + ".npz")})
    workers = min(chains, os.cpu_count() or 1) if workers is None else max(1, int(workers))
    outs = _run_chains(jobs, workers)
    est, sq, sq_err = analyze(g, outs, beta, bins, canonical=particles is not None)
    return est, sq, sq_err, outs


def run_qmc(model: Model, cluster=None, size=None, T: float | None = None, sweeps: int = 10000,
            thermalization: int | None = None, bins: int = 32, seed: int = 0, chains: int = 1,
            checkpoint: str | None = None, *, workers: int | None = None, slices: int = 4,
            epsilon: float | None = None, checkpoint_interval: float = 5.0,
            beta0: float | None = None, beta_max: float | None = None, ph_flip: bool = True,
            replicas: int = 1, mu_step: float | None = None, T_hot: float | None = None, mu_ladder=None,
            T_ladder=None, fixed_filling: float | None = None) -> QMCResult:
    r"""Stochastic series expansion QMC of hard-core bosons on a periodic torus.

    Parameters
    ----------
    model : Model
        Hard-core (``U = inf``) model with ``t >= 0`` on every family.
    cluster : str or 2x2 int array, optional
        Named torus of :data:`phasemap.ed.clusters.CLUSTERS` (``"tri12"``, ``"tri36"``,
        ``"sq16"``, ...) or two superlattice vectors. Exactly one of ``cluster``/``size``.
    size : (int, int), optional
        ``L1 x L2`` rhombus (superlattice vectors ``(L1, 0)``, ``(0, L2)``); the √3×√3 order
        (K point) needs L1 and L2 multiples of 3 on the triangular lattice.
    T : float, optional
        Temperature (model unit). Without it the ground state is approached by doubling beta
        from ``beta0`` (default 4 / max(t, |V|, |V2|)) until energy, filling, S(K)/N and
        stiffness of two successive betas agree within 2 combined sigma (or ``beta_max``,
        default 256 / max coupling, is reached: flagged).
    sweeps, thermalization, bins : int
        Measured sweeps per chain (split into ``bins`` equal bins), warm-up sweeps per chain
        (default ``max(sweeps // 5, 100)``).
    seed : int
        Same seed, same machine -> identical numbers (also after checkpoint/restart).
    chains : int
        Independent chains (seeds ``(seed, chain)``), run in parallel over ``workers``
        processes (default: min(chains, cores)); errors from the pooled bins.
    checkpoint : str, optional
        Folder for per-chain checkpoint files, written atomically every
        ``checkpoint_interval`` seconds of work; an existing file with the same run
        parameters is resumed.
    slices : int
        Time slices per sweep at which S(Q) and the K-point moments are measured.
    epsilon : float, optional
        Constant added to every bond shift (default 0.25 t per bond type, see docs/qmc.md).
    ph_flip : bool
        Attempt one global particle-hole flip ``n_i -> 1 - n_i`` of the configuration per sweep
        (Metropolis; always accepted at the particle-hole-symmetric point, e.g. mu = 3V on the
        triangular lattice, where it connects the sectors N and N_sites - N). Default True; the
        acceptance rate is in ``info["flip_acceptance"]``.
    replicas, mu_step, T_hot, mu_ladder, T_ladder
        Replica exchange (parallel tempering) in the chemical potential and/or the temperature
        (docs/qmc.md, ``phasemap.qmc.tempering``): every chain runs ``replicas`` copies at
        ``mu + mu_step * (k - (replicas - 1) // 2)`` (default ``mu_step = 1 / sqrt(beta N / max
        coupling)``), or, with ``T_hot``, at temperatures geometric from ``T`` to ``T_hot``; or at
        the explicit lists ``mu_ladder`` / ``T_ladder`` (containing the run's mu / T; both: pairs),
        exchanging configurations between neighbours after every sweep. The estimates are those
        of the run's (mu, T); ``info["replicas"]`` has every replica's energy, filling,
        compressibility and S(K)/N, ``info["swap_acceptance"]`` the acceptance per neighbouring
        pair. Default ``replicas=1`` (off): every replica costs about one chain.
    fixed_filling : float, optional
        Sample at the fixed particle number ``floor(fixed_filling * N_sites + 1/2)`` (canonical
        ensemble; ``mu`` then only shifts the energy by ``-mu N``): loops that would change N are
        undone (``kernel``, "Canonical sampling"). For the half-filled triangular lattice this is
        the ensemble of ``mu = 3V`` (particle-hole symmetry) without the slow motion of the
        grand-canonical chains between particle-number sectors (docs/qmc.md). The filling is then
        exact (error 0) and the compressibility is not measured (NaN). Not with replica exchange.

    Returns
    -------
    QMCResult

    Raises
    ------
    ConfigError
        Soft-core model (U finite), t < 0, doubled bonds on a small torus, bad run parameters.
    """
    if not isinstance(model, Model):
        raise ConfigError(f"model: expected a phasemap.Model, got {type(model).__name__}")
    g = torus(model, cluster, size, epsilon)
    scale = max(max(model.t), max(abs(v) for v in model.V), abs(model.V2), 1e-12)
    rx = dict(replicas=replicas, mu_step=mu_step, T_hot=T_hot, mu_ladder=mu_ladder, T_ladder=T_ladder)
    ladder_points(model.mu, 1.0 if T is None else 1.0 / _temperature(T), T is not None, n_sites=g.n_sites,
                  scale=scale, **rx)  # refuse bad ladders before any sampling
    particles = fixed_particles(fixed_filling, g.n_sites)
    kw = dict(sweeps=sweeps, thermalization=thermalization, bins=bins, seed=seed, chains=chains,
              checkpoint=checkpoint, workers=workers, slices=slices, checkpoint_interval=checkpoint_interval,
              ph_flip=ph_flip, particles=particles)
    flags = []
    if particles is not None:
        flags.append(f"fixed particle number N = {particles} (canonical; compressibility not measured)")
    if g.k_index < 0 and model.lattice == "triangular":
        flags.append("no-K-point (torus not sqrt3 x sqrt3 compatible: no S(K)/N, no Binder ratio)")
    info = {"shift_per_type": {ty["name"]: ty["C"] for ty in g.types},
            "bounce_max": [ti["bounce"] for ti in g.table_info],
            "heat_bath_sets": [ti["heat_bath"] for ti in g.table_info], "n_bonds": int(len(g.bonds)),
            "fixed_particles": particles}
    if T is not None:
        T = _temperature(T)
        beta = 1.0 / T
        t0 = time.perf_counter()
        ladder = replica_ladder(model, g, beta, True, rx, scale, cluster, size, epsilon)
        est, sq, sq_err, outs = run_graph(g, beta, ladder=ladder and [x[:2] for x in ladder], **kw)
        betas, gs_record = [beta], []
    else:
        b = (GROUND_STATE["beta0"] if beta0 is None else float(beta0)) / scale
        bmax = (GROUND_STATE["beta_max"] if beta_max is None else float(beta_max)) / scale
        if not (b > 0) or not (bmax >= b):
            raise ConfigError(f"beta0/beta_max: need 0 < beta0 <= beta_max, got {beta0}, {beta_max}")
        t0 = time.perf_counter()
        prev, betas, gs_record = None, [], []
        while True:
            ladder = replica_ladder(model, g, b, False, rx, scale, cluster, size, epsilon)
            cur = run_graph(g, b, ladder=ladder and [x[:2] for x in ladder], **kw)
            betas.append(b)
            if prev is not None:
                same = _agree(prev[0], cur[0])
                gs_record.append({"beta": b, "agree_with_beta/2": same})
                if same:
                    break
            if 2 * b > bmax * (1 + 1e-12):
                if prev is not None:
                    flags.append(f"ground-state-not-reached (beta_max = {bmax:.4g}: observables still change)")
                break
            prev = cur
            b *= 2
        est, sq, sq_err, outs = cur
        beta = b
    info.update({"cutoff_M": [o["M"] for o in outs], "loops_per_sweep": [o["nloops"] for o in outs],
                 "vertex_visits": int(sum(o["visits"] for o in outs)),
                 "chain_seconds": [o["elapsed"] for o in outs], "wall_seconds": time.perf_counter() - t0,
                 "measure_seconds": [o["meas_seconds"] for o in outs],
                 "measure_cpu_seconds": [o["meas_cpu"] for o in outs],
                 "ground_state_search": gs_record,
                 "flip_acceptance": [o["flip_accepted"] / o["flip_attempts"] if o["flip_attempts"] else None
                                     for o in outs],
                 "particle_numbers": [_histogram(o["rec"][:, 1]) for o in outs],
                 "sector_moves": [o["sector_moves"] for o in outs]})
    if ladder is not None:
        info.update(replica_info(ladder, outs, int(bins)))
    if any(o["max_ops"] >= o["M"] for o in outs):
        flags.append("operator-string cut-off reached during measurement (thermalization too short; run longer)")
    bad = not_decorrelated(est)
    if bad:
        flags.append("not decorrelated: " + ", ".join(bad) + " (error still grows with bin length; run longer)")
    cut = any(o["max_ops"] >= o["M"] for o in outs)
    frozen = ladder is not None and frozen_sectors(outs, g.n_sites, int(bins))
    if frozen:
        flags.append("particle-number sectors not sampled: the replicas' configurations changed |N - N_sites/2| "
                     f"fewer than once per bin ({frozen}); the exchanges only redistribute the sectors they had "
                     "after the warm-up")
        bad = bad + ["sector moves"]
    return QMCResult(model=model, cluster=g.name, n_sites=g.n_sites, T=1.0 / beta, beta=beta,
                     ground_state=T is None, estimates=est, momenta=g.momenta.copy(), sq=sq, sq_err=sq_err,
                     decorrelated=not bad and not cut, flags=flags, sweeps=int(sweeps), thermalization=int(outs[0]["thermalization"]),
                     bins=int(bins), chains=int(chains), seed=int(seed), betas=betas, vectors=g.cell.vectors.tolist(),
                     info=info)


def fixed_particles(fixed_filling, n_sites: int) -> int | None:
    """Particle number of a run at ``fixed_filling`` (None: grand canonical): the nearest integer
    to ``fixed_filling * n_sites``, halves rounded up (9x9 at 1/2: 41 particles)."""
    if fixed_filling is None:
        return None
    try:
        f = float(fixed_filling)
    except (TypeError, ValueError):
        raise ConfigError(f"fixed_filling: expected a number in [0, 1], got {fixed_filling!r}") from None
    if isinstance(fixed_filling, bool) or not (0.0 <= f <= 1.0):
        raise ConfigError(f"fixed_filling: expected a number in [0, 1], got {fixed_filling!r}")
    return int(math.floor(f * n_sites + 0.5))


def _temperature(T) -> float:
    return positive("T", T, "temperature")


def _histogram(x) -> dict:
    v, c = np.unique(np.asarray(x).astype(np.int64), return_counts=True)
    return {int(a): int(b) for a, b in zip(v, c)}


def replica_ladder(model, g, beta, fixed_T, opts, scale, cluster, size, epsilon):
    """``[(graph, beta, mu)]`` of the replica ladder (``(g, beta, model.mu)`` among them), or None
    without replica exchange (``opts``: replicas, mu_step, T_hot, mu_ladder, T_ladder)."""
    pts = ladder_points(model.mu, beta, fixed_T, n_sites=g.n_sites, scale=scale, **opts)
    if pts is None:
        return None
    pts, tgt = pts
    graphs = {}
    out = []
    for k, (m, b) in enumerate(pts):
        if k == tgt:
            out.append((g, beta, model.mu))
            continue
        if m == model.mu:
            x = g
        else:
            x = graphs.get(m) or torus(model.replace(mu=m), cluster, size, epsilon)
            graphs[m] = x
        out.append((x, b, m))
    return out


def replica_info(ladder, outs, bins) -> dict:
    """(mu, T) of every replica, swap acceptance per neighbouring pair (pooled over chains),
    walker positions and every replica's energy, filling, compressibility and S(K)/N."""
    R = len(ladder)
    acc = []
    for a in range(R - 1):
        tried = sum(o["swaps"][a][0] for o in outs)
        acc.append(sum(o["swaps"][a][1] for o in outs) / tried if tried else None)
    reps = []
    for r, (x, b, mu) in enumerate(ladder):
        est, _, _ = analyze(x, [{"rec": o["replicas"][r]["rec"], "sq_bins": o["replicas"][r]["sq_bins"]}
                                for o in outs], b, bins)
        reps.append({"mu": float(mu), "T": 1.0 / b,
                     **{k: est[k].to_dict() for k in ("energy", "filling", "compressibility", "S(K)/N") if k in est},
                     "particle_numbers": [_histogram(o["replicas"][r]["rec"][:, 1]) for o in outs]})
    return {"mu_ladder": [r["mu"] for r in reps], "T_ladder": [r["T"] for r in reps], "swap_acceptance": acc,
            "replicas": reps, "walkers": [o["walker"] for o in outs]}


def frozen_sectors(outs, n_sites: int, bins: int) -> str:
    """Replica chains whose configurations hardly change particle-number sector: fewer than ``bins``
    sector moves (summed over the slots) while the slots hold more than one ``|N - N_sites/2|``.
    Returns a description ("" if none). Why: an exchange moves a configuration between ladder
    points but never changes its N; if the configurations' own N never changes, the sector
    weights at the run's mu are those of the warm-up, not sampled."""
    out = []
    for c, o in enumerate(outs):
        seen = {abs(2 * n - n_sites) for rp in o["replicas"] for n in np.unique(rp["rec"][:, 1])}
        moves = int(sum(o["sector_moves"]))
        if moves < bins and len(seen) > 1:
            out.append(f"chain {c}: {moves} sector moves, |2N - N_sites| in {sorted(int(x) for x in seen)}")
    return "; ".join(out)


def not_decorrelated(est: dict) -> list:
    """Names of the estimates that make a run *not decorrelated* (``_DECORRELATION_KEYS``)."""
    return [k for k in _DECORRELATION_KEYS if k in est and not est[k].decorrelated]


def _agree(a: dict, b: dict, nsigma: float | None = None) -> bool:
    """Ground-state criterion: every key observable of beta and 2 beta agrees within nsigma."""
    nsigma = GROUND_STATE["nsigma"] if nsigma is None else nsigma
    for k in _KEY_ESTIMATES:
        if k in a and k in b:
            d = abs(a[k].value - b[k].value)
            s = math.hypot(a[k].error, b[k].error)
            if not (d <= nsigma * s or d <= 1e-12):
                return False
    return True
