package main

import (
	"context"
	"fmt"
	"time"

	"github.com/residua/residua/ipm"
	"github.com/residua/residua/solve"
)

// bakeryReport is the bakery scenario's outcome, the object --json prints.
type bakeryReport struct {
	Scenario        string    `json:"scenario"`
	Bakeries        int       `json:"bakeries"`
	Cafes           int       `json:"cafes"`
	Objective       solve.Num `json:"objective"` // the cost of the shipping plan
	Iterations      int       `json:"iterations"`
	NormalSolves    int       `json:"normal_solves"`
	WorstRelResid   solve.Num `json:"worst_relative_residual"`
	WeightRatio     solve.Num `json:"weight_ratio"` // the largest max d/min d
	Preconditioner  string    `json:"preconditioner"`
	Seconds         solve.Num `json:"seconds"`
	ShippedLoaves   solve.Num `json:"shipped_loaves"`
	OrderedLoaves   solve.Num `json:"ordered_loaves"`
	BusiestBakery   int       `json:"busiest_bakery"` // 1-based
	BusiestShipment solve.Num `json:"busiest_bakery_loaves"`
}

// runBakery solves demo's bakery scenario (see demoAbout).
func runBakery(ctx context.Context, e *env, o *solveOpts, bakeries, cafes int, seed uint64) error {
	if bakeries < 1 || cafes < 1 || bakeries*cafes > 1<<22 {
		return usageErrorf("demo: --bakeries %d and --cafes %d must be at least 1 (and their product at most %d)", bakeries, cafes, 1<<22)
	}
	pc := o.precond
	switch pc {
	case "auto":
		pc = "jacobi"
	case "jacobi", "ic0", "none":
	default:
		return usageErrorf("demo: --precond %s: the bakery scenario's normal equations take auto, jacobi, ic0 or none", o.precond)
	}
	p := ipm.Bakery(bakeries, cafes, seed)
	start := time.Now()
	res, err := ipm.Solve(ctx, p, ipm.Options{Preconditioner: pc})
	if err != nil {
		return err
	}
	rep := bakeryReport{Scenario: "bakery", Bakeries: bakeries, Cafes: cafes, Objective: solve.Num(res.Objective),
		Iterations: res.Iterations, NormalSolves: res.Solves, WorstRelResid: solve.Num(res.WorstRelRes),
		WeightRatio: solve.Num(res.WeightRatio), Preconditioner: pc, Seconds: solve.Seconds(time.Since(start))}
	for j := range cafes {
		rep.OrderedLoaves += solve.Num(p.B[bakeries+j])
	}
	for i := range bakeries {
		sent := 0.0
		for j := range cafes {
			sent += res.X[i*cafes+j]
		}
		rep.ShippedLoaves += solve.Num(sent)
		if solve.Num(sent) > rep.BusiestShipment {
			rep.BusiestBakery, rep.BusiestShipment = i+1, solve.Num(sent)
		}
	}
	if o.json {
		return writeJSON(e.stdout, &rep)
	}
	fmt.Fprintf(e.stdout, "Shipping plan: %d bakeries, %d cafés, %.0f loaves ordered.\n", bakeries, cafes, float64(rep.OrderedLoaves))
	fmt.Fprintf(e.stdout, "optimal cost %.6f after %d interior-point iterations (Mehrotra's predictor-corrector)\n", res.Objective, res.Iterations)
	fmt.Fprintf(e.stdout, "  normal equations  %d solves of (A·D·Aᵀ)·Δλ = r by residua (%s), worst true relative residual %s\n",
		res.Solves, pc, solve.Sci(res.WorstRelRes))
	fmt.Fprintf(e.stdout, "  weights D = X·S⁻¹ max d/min d reached %s (the normal equations' ill-conditioning near the optimum)\n", solve.Sci(res.WeightRatio))
	fmt.Fprintf(e.stdout, "  shipped           %.1f loaves; the busiest bakery, number %d, sends %.1f\n",
		float64(rep.ShippedLoaves), rep.BusiestBakery, float64(rep.BusiestShipment))
	fmt.Fprintf(e.stdout, "  time              %s\n", formatDuration(time.Since(start)))
	return nil
}
