"""The recourse program as an integer program: pulp with HiGHS (in-process) or the bundled
CBC command line, and scipy's milp as a second solver for the tests. `recourse.program` lays
the rows out (`_rows`) and checks every answer; this module only hands them to a solver.
"""

from __future__ import annotations

import functools
import os
import sys
import tempfile
import warnings

import numpy as np
import pulp

from recourse.program import TOLERANCE, Program, _choice, _Rows


@functools.cache
def _hush_highs_banner() -> None:
    """HiGHS prints a banner on stdout when a process makes its first solver: send it nowhere."""
    import highspy

    sys.stdout.flush()
    saved = os.dup(1)
    try:
        with open(os.devnull, "w") as sink:
            os.dup2(sink.fileno(), 1)
            highspy.Highs()
    finally:
        os.dup2(saved, 1)
        os.close(saved)


def _pulp_solver(solver: str, preprocess: bool = False) -> pulp.LpSolver:
    if solver == "highs":
        _hush_highs_banner()
        # the feasibility-jump heuristic took ~2 of the ~3 ms HiGHS spent on a typical
        # program; the bound has usually left a few dozen binaries, so it is not needed
        return pulp.HiGHS(msg=False, gapRel=0.0, gapAbs=0.0, threads=1,
                          mip_feasibility_tolerance=TOLERANCE,
                          primal_feasibility_tolerance=TOLERANCE,
                          mip_heuristic_run_feasibility_jump=False)
    with warnings.catch_warnings():  # PuLP 3.3 warns that the bundled CBC goes away in 4.0
        warnings.simplefilter("ignore", DeprecationWarning)
        # the bundled CBC 2.10.3 called dearer plans optimal (programs in tests/test_program.py)
        # when its preprocessing was on, or when it guessed an objective step from the costs
        options = [f"increment {TOLERANCE}", f"primalTolerance {TOLERANCE}",
                   f"integerTolerance {TOLERANCE}"] + ([] if preprocess else ["preprocess off"])
        # no `threads`: with -threads 1 the bundled CBC waited 10 s now and then (3 runs in 600)
        return pulp.PULP_CBC_CMD(msg=False, gapRel=0.0, gapAbs=0.0, options=options)


def pulp_run(program: Program, layout: _Rows, solver: str) -> tuple[int, ...] | None:
    problem = pulp.LpProblem("recourse", pulp.LpMinimize)
    binaries = layout.binaries
    x = [problem.add_variable(f"x{i:05d}", 0, 1, pulp.LpBinary) for i in range(binaries)]
    # after the binaries: t (largest-cost) and the pairwise tables' cells, continuous
    x += [problem.add_variable("t" if i == 0 and program.objective == "largest-cost"
                               else f"z{i:05d}", 0, None, pulp.LpContinuous)
          for i in range(len(layout.objective) - binaries)]
    problem.setObjective(pulp.LpAffineExpression(
        [(x[i], float(c)) for i, c in enumerate(layout.objective) if c != 0]))
    senses = {"=": pulp.LpConstraintEQ, ">=": pulp.LpConstraintGE, "<=": pulp.LpConstraintLE}
    for k, (columns, coefficients, sense, rhs) in enumerate(layout.rows):
        pairs = zip(columns, coefficients, strict=True)
        terms = pulp.LpAffineExpression([(x[i], float(c)) for i, c in pairs])
        problem.addConstraint(pulp.LpConstraint(terms, senses[sense], f"r{k}", float(rhs)))
    engine = _pulp_solver(solver)
    if solver == "highs":  # in-process: no files
        problem.solve(engine)
    else:
        with tempfile.TemporaryDirectory(prefix="recourse-") as scratch:
            engine.tmpDir = scratch  # CBC's files go here and vanish with it, even on errors
            try:
                problem.solve(engine)
            except pulp.PulpSolverError:  # with preprocessing off it crashed on some programs
                # that had no integer choice (tests/test_program.py keeps one): run it once more
                engine = _pulp_solver(solver, preprocess=True)  # with it on; checked as always
                engine.tmpDir = scratch
                problem.solve(engine)
    if problem.status == pulp.LpStatusInfeasible:
        return None
    if problem.status != pulp.LpStatusOptimal:
        raise RuntimeError(f"{solver} stopped with status {pulp.LpStatus[problem.status]}")
    values = np.array([var.varValue if var.varValue is not None else 0.0 for var in x])
    return _choice(program, layout, values, solver)


def scipy_run(program: Program, layout: _Rows) -> tuple[int, ...] | None:
    from scipy.optimize import Bounds, LinearConstraint, milp

    size = len(layout.objective)
    matrix = np.zeros((len(layout.rows), size))
    lower = np.full(len(layout.rows), -np.inf)
    upper = np.full(len(layout.rows), np.inf)
    for k, (columns, coefficients, sense, rhs) in enumerate(layout.rows):
        matrix[k, columns] = coefficients
        lower[k] = rhs if sense in ("=", ">=") else -np.inf
        upper[k] = rhs if sense in ("=", "<=") else np.inf
    integrality, high = np.ones(size), np.ones(size)
    integrality[layout.binaries:], high[layout.binaries:] = 0, np.inf  # t and cells
    result = milp(layout.objective, constraints=LinearConstraint(matrix, lower, upper),
                  integrality=integrality, bounds=Bounds(np.zeros(size), high),
                  options={"disp": False, "mip_rel_gap": 0.0, "presolve": False})
    # presolve off: scipy 1.16's HiGHS 1.8 presolve called a one-group program infeasible
    if result.status == 2:
        return None
    if result.status != 0:
        raise RuntimeError(f"scipy milp stopped: {result.message}")
    return _choice(program, layout, np.asarray(result.x), "scipy")
