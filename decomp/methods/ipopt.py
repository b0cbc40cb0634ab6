"""Method ``ipopt``: the PNLP straight from the arrays with cyipopt.

Ipopt minimizes -revenue subject to g(x) = A x <= c:

* objective  -sum_j f_j S_j(x_j), gradient -f_j P(D_j > x_j) (numpy, exact);
* Hessian of the Lagrangian: diagonal, sigma_f f_j phi(z_j) / std_j (the
  constraints are linear and add nothing);
* Jacobian: the constant incidence A, its sparsity given once (COO).

Products with std = 0 have S_j(x) = min(x, mean_j); they are modelled as
x_j <= mean_j with linear revenue f_j x_j (smooth, same optimum).

Bid prices are Ipopt's constraint multipliers ``mult_g``, >= 0 for g <= c in a
minimization, which is our convention.

Default ``bound_relax_factor = 0``: Ipopt's default (1e-8) relaxes every
bound, here the capacities, so that the returned allocation overbooks legs by
about 1e-8 relative and its revenue lies above the true optimum (about 4e-9
relative on a 10,000-product instance); with 0 the answer is feasible and
matches an exact dual solve to about 5e-9. It can be set back through
``SolverOptions.solver_options``.
"""

from __future__ import annotations

import logging
import time

import numpy as np

from .. import distributions, normal
from ..errors import ConfigError, InstanceError
from ..registry import register
from ..result import Termination
from .common import certified_result, import_available, import_solver

log = logging.getLogger(__name__)
#: Progress of long solves (iteration, revenue, time), every PROGRESS_SECONDS; ``decomp solve`` shows it.
progress = logging.getLogger("decomp.progress.ipopt")
PROGRESS_SECONDS = 5.0

#: Ipopt's ApplicationReturnStatus (IpReturnCodes_inc.h of Ipopt 3.14; the same
#: values are declared in cyipopt's ipopt.pxd, which lacks -5) -> (name, Termination).
#: A test checks that every code of the installed cyipopt's enum is listed.
STATUS = {
    0: ("Solve_Succeeded", Termination.OPTIMAL),
    1: ("Solved_To_Acceptable_Level", Termination.NUMERICAL_ERROR),  # stalled at looser "acceptable" tol
    2: ("Infeasible_Problem_Detected", Termination.INFEASIBLE),
    3: ("Search_Direction_Becomes_Too_Small", Termination.NUMERICAL_ERROR),
    4: ("Diverging_Iterates", Termination.UNBOUNDED),
    5: ("User_Requested_Stop", Termination.ERROR),
    6: ("Feasible_Point_Found", Termination.ERROR),                  # square problems only
    -1: ("Maximum_Iterations_Exceeded", Termination.ITERATION_LIMIT),
    -2: ("Restoration_Failed", Termination.NUMERICAL_ERROR),
    -3: ("Error_In_Step_Computation", Termination.NUMERICAL_ERROR),
    -4: ("Maximum_CpuTime_Exceeded", Termination.TIME_LIMIT),
    -5: ("Maximum_WallTime_Exceeded", Termination.TIME_LIMIT),
    -10: ("Not_Enough_Degrees_Of_Freedom", Termination.ERROR),
    -11: ("Invalid_Problem_Definition", Termination.ERROR),
    -12: ("Invalid_Option", Termination.ERROR),
    -13: ("Invalid_Number_Detected", Termination.NUMERICAL_ERROR),
    -100: ("Unrecoverable_Exception", Termination.ERROR),
    -101: ("NonIpopt_Exception_Thrown", Termination.ERROR),
    -102: ("Insufficient_Memory", Termination.ERROR),
    -199: ("Internal_Error", Termination.ERROR),
}

#: Ipopt's "infinity" for bounds.
_INF = 1e20


def termination(code) -> tuple:
    """(status name, Termination) of an Ipopt return code."""
    code = int(code)
    if code not in STATUS:
        log.warning("Ipopt return status %d has no mapping; reported as unknown", code)
        return f"status_{code}", Termination.UNKNOWN
    return STATUS[code]


def ipopt_version() -> str:
    import cyipopt

    return "Ipopt " + ".".join(str(v) for v in cyipopt.IPOPT_VERSION)


#: Ipopt reads ``ipopt.opt`` from the working folder unless ``option_file_name`` says otherwise, and
#: such a file may name an ``output_file`` to overwrite: the working folder is not the user's choice of
#: solver options, so no option file is read (an empty name; Ipopt 3.14 reads none then).
NO_OPTION_FILE = {"option_file_name": ""}


def ipopt_options(options) -> dict:
    """Ipopt option values for ``options`` (solver_options last, so they win; no ``ipopt.opt`` is read
    from the working folder, see :data:`NO_OPTION_FILE`)."""
    opts = {
        **NO_OPTION_FILE,
        "tol": float(options.tol),
        "bound_relax_factor": 0.0,
        "print_level": 5 if options.verbose else 0,
        "sb": "yes",
    }
    if options.iteration_limit is not None:
        opts["max_iter"] = int(options.iteration_limit)
    if options.time_limit is not None:
        opts["max_wall_time"] = float(options.time_limit)
    opts.update(dict(options.solver_options))
    return opts


class PnlpArrays:
    """The PNLP callbacks for cyipopt (minimize -revenue, g = A x)."""

    def __init__(self, instance):
        self.fare = instance.fare
        self.mean = instance.mean
        self.std = np.where(instance.std > 0, instance.std, 1.0)
        self.smooth = instance.std > 0
        self.instance = instance
        coo = instance.A.tocoo()
        self.A = instance.A
        self.rows, self.cols = coo.row.astype(np.int64), coo.col.astype(np.int64)
        self.jac = coo.data.astype(np.float64)
        self.diag = np.arange(instance.n_products, dtype=np.int64)
        self.iterations = 0

    def objective(self, x):
        s = normal.expected_sales(np.maximum(x, 0.0), self.mean, np.where(self.smooth, self.std, 0.0))
        # std = 0 products: linear revenue f x on 0 <= x <= mean
        s = np.where(self.smooth, s, x)
        return -float(self.fare @ s)

    def gradient(self, x):
        z = (x - self.mean) / self.std
        tail = np.where(self.smooth, normal.upper_tail(z), 1.0)
        return -self.fare * tail

    def constraints(self, x):
        return self.A @ x

    def jacobianstructure(self):
        return self.rows, self.cols

    def jacobian(self, x):
        return self.jac

    def hessianstructure(self):
        return self.diag, self.diag

    def hessian(self, x, lagrange, obj_factor):
        z = (x - self.mean) / self.std
        h = self.fare * normal.pdf(z) / self.std
        return obj_factor * np.where(self.smooth, h, 0.0)

    def intermediate(self, alg_mod, iter_count, obj_value, inf_pr, inf_du, mu, d_norm,
                     regularization_size, alpha_du, alpha_pr, ls_trials):
        self.iterations = int(iter_count)
        if not hasattr(self, "progress"):
            self.progress = ProgressLog("ipopt")
        self.progress(iter_count, -obj_value, inf_pr)
        return True


class ProgressLog:
    """Logs iteration, revenue, primal infeasibility and time on ``decomp.progress``, at most every
    :data:`PROGRESS_SECONDS` (``decomp solve`` shows it; nothing is printed by the library)."""

    def __init__(self, method: str):
        self.method = method
        self.start = self.last = time.perf_counter()

    def __call__(self, iteration, revenue, primal_infeasibility) -> None:
        now = time.perf_counter()
        if now - self.last >= PROGRESS_SECONDS:
            self.last = now
            progress.info("%s: iteration %d, revenue %.10g, primal infeasibility %.2e, %.1f s", self.method,
                          iteration, revenue, primal_infeasibility, now - self.start)


def nonnegative_bid_prices(pi, fare):
    """Bid prices >= 0 from Ipopt's constraint multipliers, and a note when any was negative.

    Ipopt's ``mult_g`` is the multiplier of g(x) - s = 0 with s <= c; only at a
    converged point does it equal the (>= 0) multiplier of the bound, so an
    iterate stopped early (iteration or time limit) can carry negative values.
    Any pi >= 0 gives a valid Lagrangian dual bound, so the prices are clipped
    at 0; the note says how far below 0 they were (round-off below 1e-9 of the
    largest fare is not mentioned).
    """
    pi = np.asarray(pi, dtype=np.float64)
    low = float(pi.min()) if pi.size else 0.0
    clipped = np.maximum(pi, 0.0)
    scale = max(1.0, float(np.max(fare))) if len(fare) else 1.0
    if low < -1e-9 * scale:
        n = int(np.sum(pi < 0))
        return clipped, (f"{n} of Ipopt's leg multipliers were negative (down to {low:.4g}; the iterate is "
                         f"not dual feasible); those bid prices are set to 0")
    return clipped, None


def start_point(instance, warm_start_pi=None):
    """A starting allocation: the newsvendor answer at the warm-start bid prices,
    or the mean scaled so that no leg is overbooked."""
    if warm_start_pi is not None:
        with np.errstate(divide="ignore", invalid="ignore"):     # std = 0 products in the fractile
            x, _ = distributions.subproblems(instance, instance.leg_sum(warm_start_pi))
        return np.maximum(x, 0.0)
    m = np.maximum(instance.mean, 0.0)
    load = instance.leg_load(m)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(load > 0, instance.capacity / np.where(load > 0, load, 1.0), 1.0)
    theta = np.minimum(1.0, ratio)
    # each product scaled by its tightest leg: then A x0 <= c leg by leg
    per_product = np.ones(len(m))
    n_legs = instance.legs_per_product
    has = n_legs > 0
    if len(instance.leg_index) and np.any(has):
        mins = np.minimum.reduceat(theta[instance.leg_index], instance.leg_ptr[:-1][has])
        per_product[has] = mins
    return 0.5 * m * per_product


def require_normal(instance, method: str) -> None:
    """The PNLP of the direct methods is written for normal demand: refuse anything else."""
    names = instance.distributions()
    other = names != "normal"
    if np.any(other):
        j = int(np.flatnonzero(other)[0])
        raise InstanceError(
            f"method {method!r} models normal demand only; {int(other.sum())} products have other "
            f"distributions (first: product {instance.product_ids[j]!r}, {names[j]!r}); "
            "use method 'lagrangian' for those", column="distribution", value=names[j])


def warm_start_array(instance, warm_start):
    """Bid prices aligned with the legs from a dict by leg id or an array; None if not given."""
    if warm_start is None:
        return None
    if isinstance(warm_start, dict):
        pos = instance.leg_position()
        pi = np.zeros(instance.n_legs)
        for leg, v in warm_start.items():
            if leg in pos:
                pi[pos[leg]] = float(v)
        return np.maximum(pi, 0.0)
    pi = np.asarray(warm_start, dtype=np.float64)
    if pi.shape != (instance.n_legs,):
        raise ConfigError(f"warm_start has shape {pi.shape}, expected ({instance.n_legs},) bid prices")
    return np.maximum(pi, 0.0)


@register
class IpoptArrays:
    """PNLP from the arrays with cyipopt: exact gradient, diagonal Hessian, constant Jacobian."""

    name = "ipopt"
    models = ("pnlp",)

    @classmethod
    def available(cls):
        return import_available("cyipopt", "pip install cyipopt")

    def solve(self, instance, model, options, warm_start=None):
        cyipopt = import_solver("cyipopt", "pip install cyipopt")
        if model != "pnlp":
            raise ConfigError(f"method 'ipopt' solves the pnlp, not {model!r}")
        require_normal(instance, self.name)
        t0 = time.perf_counter()
        P, L = instance.n_products, instance.n_legs
        cb = PnlpArrays(instance)
        lb = np.zeros(P)
        ub = np.where(instance.std > 0, _INF, np.maximum(instance.mean, 0.0))
        cl = np.full(L, -_INF)
        cu = instance.capacity.astype(np.float64)
        pi0 = warm_start_array(instance, warm_start)
        x0 = np.minimum(start_point(instance, pi0), ub)
        nlp = cyipopt.Problem(n=P, m=L, problem_obj=cb, lb=lb, ub=ub, cl=cl, cu=cu)
        opts = ipopt_options(options)
        if pi0 is not None:
            opts.setdefault("warm_start_init_point", "yes")
        for k, v in opts.items():
            try:
                nlp.add_option(k, v)
            except TypeError as exc:
                raise ConfigError(f"Ipopt rejected option {k}={v!r}: {exc}") from exc
        t1 = time.perf_counter()
        if pi0 is not None:
            x, info = nlp.solve(x0, lagrange=pi0)
        else:
            x, info = nlp.solve(x0)
        t2 = time.perf_counter()
        name, term = termination(info["status"])
        x = np.asarray(x, dtype=np.float64)
        pi = np.asarray(info["mult_g"], dtype=np.float64)
        finite = bool(np.all(np.isfinite(x)) and np.all(np.isfinite(pi)))
        msg = info.get("status_msg", b"")
        msg = msg.decode(errors="replace") if isinstance(msg, bytes) else str(msg)
        if msg == "Unknown status":
            msg = name
        if pi is not None and finite:
            pi, note = nonnegative_bid_prices(pi, instance.fare)
            if note:
                msg = f"{msg}; {note}"
        return certified_result(
            instance, model, self.name, options, termination=term, x=x if finite else None,
            pi=pi if finite else None, marks=(t0, t1, t2), iterations=cb.iterations,
            solver="cyipopt", solver_version=ipopt_version(), raw_status=f"{int(info['status'])} {name}",
            message=msg, extra_options={"ipopt": opts})
