"""Sampler options shared by the half-filling validation scripts (validate_qmc_supersolid.py,
validate_qmc_halffilling.py): replica exchange and the fixed particle number."""


def add_sampler_args(p) -> None:
    p.add_argument("--replicas", type=int, default=1,
                   help="replica exchange: replicas per chain (default 1 = off; docs/qmc.md, Replica exchange)")
    p.add_argument("--mu-step", type=float, default=None, dest="mu_step", help="mu ladder spacing (default: run_qmc)")
    p.add_argument("--T-hot", type=float, default=None, dest="T_hot", help="temperature ladder up to T_HOT instead")
    p.add_argument("--fixed-filling", type=float, default=0.5, dest="fixed_filling",
                   help="sample at the fixed particle number nearest FILLING x sites (default 0.5: half filling, "
                        "the ensemble of mu = 3V; docs/qmc.md, Fixed particle number)")
    p.add_argument("--grand-canonical", action="store_true", dest="grand_canonical",
                   help="sample the particle number at mu = 3V instead (slow between |N - N_sites/2| sectors "
                        "at these temperatures, docs/qmc.md)")


def sampler_run_options(a, checkpoint: str) -> dict:
    """run_qmc options of the parsed arguments ``a`` (chain checkpoints in ``checkpoint``)."""
    return {"checkpoint": checkpoint, "checkpoint_interval": 30.0, "replicas": a.replicas, "mu_step": a.mu_step,
            "T_hot": a.T_hot, "fixed_filling": None if a.grand_canonical else a.fixed_filling}
