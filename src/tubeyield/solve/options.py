"""Ipopt option sets, in one place: the defaults measured for collocation models of reaction networks, the sets for
warm starts, refined meshes and recovery, and the options a study may set (`numerics.ipopt`).

The measurements quoted are from this project's own runs (demo study and invented stiff networks, 2-core x86_64).
"""

from __future__ import annotations

# Options measured to suit collocation models of reaction networks: the adaptive barrier update
# cuts iterations several-fold; MUMPS's permutation-based scaling stays off (with the row and column scaling on, it
# changed nothing on the demo or the stiff networks below). MUMPS's row and column
# iterative scaling (mumps_scaling 8) must stay on: without it, a 16-species network with rate constants over 12
# decades took 1.7 s per Ipopt iteration (257 iterations, 441 s) and a 20-species one did not finish in 30 min,
# against 44 iterations in 0.75 s and 237 in 7 s with it; the demo is unchanged (75-77 iterations over 4 starts).
# The models start from a simulated profile in which products are exactly at their bound of zero: Ipopt's default
# bound push (1e-2) moves them off it and breaks the collocation equations by O(1/h). A push of 1e-8 keeps the start
# (measured on the demo, 4 starts: 11-28 iterations, against 105 with the default push; a gas case with conversion
# near 1 failed one start in 684 iterations without state bounds and converges in 21-39 with them).
DEFAULT_OPTIONS = {
    "mu_strategy": "adaptive",
    "mumps_scaling": 8,
    "mumps_permuting_scaling": 0,
    "bound_push": 1e-8,
    "bound_frac": 1e-8,
    "bound_mult_init_method": "mu-based",
    # No bound relaxation: decisions stay inside the user's ranges and the states stay consistent with them (with
    # Ipopt's default relaxation of 1e-8 and projection afterwards, the re-simulation error grew from 9e-11 to 2e-8).
    # Pinned variables are casadi parameters, so Ipopt never sees equal bounds.
    "bound_relax_factor": 0.0,
    "tol": 1e-10,
    # Ipopt's main test scales the dual error by the size of the multipliers; with large warm-start multipliers it
    # accepted a front point 3e-6 below the optimum, with multipliers on slack limits. The unscaled tests (defaults
    # 1, 1e-4, 1e-4) must hold too, so tighten them.
    "dual_inf_tol": 1e-8,
    "compl_inf_tol": 1e-8,
    "constr_viol_tol": 1e-9,
    "acceptable_tol": 1e-7,
    "max_iter": 1000,
}

# Warm starts (continuation along a front, sweep re-solves, window cells): start from the previous primal and dual
# point with a small barrier parameter and monotone updates. Measured on the demo's 21-point front: 5 iterations per
# point (adaptive barrier from mu_init 1e-4: 5 per point but up to 496 near the end; cold starts: 6-32). Tried on
# 2026-12-05 and not kept: the adaptive update from 1e-6 took 3 per point (107 iterations over the front against
# 125) and 588 against 860 over a 120-scenario sweep, every result the same to 5e-12; but a 14 x 14 window of the
# demo with the others optimized lost 2 of its 196 cells and, with all the demo's limits, took 40 s against 34 s.
WARM_OPTIONS = {
    "warm_start_init_point": "yes",
    "warm_start_bound_push": 1e-9,
    "warm_start_bound_frac": 1e-9,
    "warm_start_slack_bound_push": 1e-9,
    "warm_start_slack_bound_frac": 1e-9,
    "warm_start_mult_bound_push": 1e-9,
    "mu_init": 1e-6,
    "mu_strategy": "monotone",
}

# A refined mesh starts from the coarse optimum, re-simulated: a point already close to the optimum, so the barrier
# starts small and decreases monotonically instead of pushing the iterates back into the interior.
REFINE_OPTIONS = {"mu_strategy": "monotone", "mu_init": 1e-6}

# When a solve stalls (iteration limit, restoration failure) it is tried once more from the same start with the
# adaptive barrier update and more iterations before the point is given up.
RECOVERY_OPTIONS = {"mu_strategy": "adaptive", "mu_init": 0.1, "max_iter": 3000}

# A cold start that stalls (iteration limit, failed restoration) is tried once more from the same point with a monotone
# barrier decrease from 1e-2. Measured on the free temperature profile of a reversible exothermic reaction
# (tests/reference/test_energy_and_control.py): with the adaptive update the barrier parameter fell to 1e-11 within a
# few iterations and, depending on round-off alone, 1 to 4 of 4 starts ended at the iteration limit (all 4 in one run
# of 8); with the monotone update from 1e-2, 31 of 32 starts converged over 8 runs (145-887 iterations). It is not the
# first choice: on a free profile of another network it ended 3 of 4 starts at worse local optima (0.311-0.341
# against 0.350 with the adaptive update).
STALL_OPTIONS = {"mu_strategy": "monotone", "mu_init": 1e-2}


# The options a study may pass through numerics.ipopt. Everything else is refused at load time: in particular every
# file option (output_file, option_file_name, print_options_documentation ...), which would let a study file make
# Ipopt read or write files, and the printing options (the terminal shows Ipopt's log only with --tee).
USER_OPTIONS = {
    "max_iter": int, "max_cpu_time": float, "max_wall_time": float,
    "tol": float, "acceptable_tol": float, "acceptable_iter": int, "acceptable_constr_viol_tol": float,
    "acceptable_dual_inf_tol": float, "acceptable_compl_inf_tol": float, "acceptable_obj_change_tol": float,
    "dual_inf_tol": float, "constr_viol_tol": float, "compl_inf_tol": float,
    "mu_strategy": str, "mu_oracle": str, "mu_init": float, "mu_min": float, "mu_max": float,
    "mu_linear_decrease_factor": float, "mu_superlinear_decrease_power": float,
    "bound_push": float, "bound_frac": float, "bound_relax_factor": float, "bound_mult_init_method": str,
    "nlp_scaling_method": str, "nlp_scaling_max_gradient": float, "obj_scaling_factor": float,
    "linear_solver": str, "mumps_pivtol": float, "mumps_pivtolmax": float, "mumps_mem_percent": int,
    "mumps_scaling": int, "mumps_permuting_scaling": int,
    "hessian_approximation": str, "limited_memory_max_history": int,
    "max_soc": int, "watchdog_shortened_iter_trigger": int, "alpha_for_y": str, "recalc_y": str,
    "fixed_variable_treatment": str, "honor_original_bounds": str, "expect_infeasible_problem": str,
    "start_with_resto": str, "required_infeasibility_reduction": float, "max_resto_iter": int,
}


def user_option_problem(name: str, value) -> str | None:
    """Why numerics.ipopt.<name> = value is refused, or None when it may pass to Ipopt (which checks the value)."""
    if name not in USER_OPTIONS:
        return ("an Ipopt option tubeyield passes through, one of " + ", ".join(sorted(USER_OPTIONS))
                + f"; {name!r} is not among them (file and printing options are never passed)")
    kind = USER_OPTIONS[name]
    if kind is str and not isinstance(value, str):
        return f"a string value for {name}, got {value!r}"
    if kind is int and (isinstance(value, bool) or not isinstance(value, int)):
        return f"an integer value for {name}, got {value!r}"
    if kind is float and (isinstance(value, bool) or not isinstance(value, (int, float))):
        return f"a number for {name}, got {value!r}"
    if kind is float and not (value == value and abs(value) != float("inf")):
        return f"a finite number for {name}, got {value!r}"
    return None
