package main

import (
	"context"
	"flag"
	"fmt"
	"math"
	"time"

	"github.com/residua/residua/sparse/stencil"
)

func init() {
	register(&command{
		name:    "demo",
		summary: "solve a built-in heat-conduction problem end to end (no files needed)",
		run:     runDemo,
	})
}

// The demo's scenario is our own invention. The numbers are round
// textbook-order conductivities (from memory): copper about 400 W/(m·K), a
// filled epoxy potting compound about 0.4 W/(m·K).
const demoAbout = `
Runs the whole job on a built-in problem, with no files: builds the matrix,
chooses a preconditioner, solves with the live display on stderr, checks the
answer and prints the summary.

The scenario (our own): a heat-spreader test block, a cube assembled from
eight smaller cubes that alternate between copper and a filled epoxy potting
compound, so the thermal conductivity jumps by a factor of about 1000 across
every inner face. The outer faces are held at the coolant temperature. The
heat sources are chosen so that the steady temperature rise is exactly 1 K
at every grid point (a manufactured solution), which lets the demo report
the error of the computed temperatures as well as the residual.

Discretised by finite volumes on a grid of --size points per side (the same
operator as 'residua generate jump3d'), it is a sparse symmetric positive
definite system with size³ unknowns. Flags as for solve.

--scenario bakery runs the other scenario (also our own): --bakeries bakeries
with daily oven capacities ship loaves to --cafes cafés with fixed orders
(random, --seed) at a cost per loaf that grows with distance on a made-up
town map. The cheapest shipping plan is a linear program, solved by a
primal-dual interior-point method (Mehrotra's predictor-corrector, Nocedal
and Wright, Numerical Optimization, §14.2) whose every step hands residua
the normal equations (A·D·Aᵀ)·Δλ = r with a new diagonal D; --precond picks
their preconditioner (auto is jacobi; ic0; none).`

const (
	demoSize     = 64
	demoContrast = 1000
)

func runDemo(ctx context.Context, e *env, args []string) error {
	o := &solveOpts{}
	var size int
	var contrast float64
	f := newFlags("demo", "residua demo [--size N] [--contrast C] [--precond auto|none|jacobi|ic0] [flags]", demoAbout)
	f.IntVar(&size, "size", demoSize, "grid points per side `N` (N³ unknowns)")
	f.Float64Var(&contrast, "contrast", demoContrast, "ratio of the two materials' conductivities")
	f.StringVar(&o.precond, "precond", "auto", "preconditioner `kind`: auto, none, jacobi or ic0")
	scenario := f.String("scenario", "heat", "`name`: heat (the heat-spreader block) or bakery (the shipping plan, a linear program)")
	bakeries := f.Int("bakeries", 8, "bakery scenario: number of bakeries")
	cafes := f.Int("cafes", 25, "bakery scenario: number of cafés")
	seed := f.Uint64("seed", 1, "bakery scenario: seed of the made-up orders, capacities and map")
	addRunFlags(f, o)
	pos, err := f.parse(e, args)
	if err != nil {
		return err
	}
	if len(pos) != 0 {
		return usageErrorf("demo: takes no arguments, got %q (run 'residua demo --help')", pos)
	}
	set := map[string]bool{}
	f.Visit(func(fl *flag.Flag) { set[fl.Name] = true })
	heatOnly := []string{"size", "contrast", "rtol", "atol", "max-iter", "time-limit", "o", "history", "plot"}
	switch *scenario {
	case "heat":
		for _, name := range []string{"bakeries", "cafes", "seed"} {
			if set[name] {
				return usageErrorf("demo: --%s applies to --scenario bakery only", name)
			}
		}
	case "bakery":
		for _, name := range heatOnly {
			if set[name] {
				return usageErrorf("demo: --%s applies to the heat scenario only (the bakery scenario's solves use the interior-point method's own tolerances)", name)
			}
		}
		return runBakery(ctx, e, o, *bakeries, *cafes, *seed)
	default:
		return usageErrorf("demo: --scenario %q: want heat or bakery", *scenario)
	}
	req, err := checkRequest("demo", o.request())
	if err != nil {
		return err
	}
	if err := checkOutputFlags("demo", o); err != nil {
		return err
	}
	if !(contrast > 0) || math.IsInf(contrast, 0) {
		return usageErrorf("demo: --contrast %v must be positive and finite", contrast)
	}
	if _, err := checkGrid("demo", size); err != nil {
		return usageErrorf("demo: --size: %v", err)
	}

	start := time.Now()
	a := stencil.Jump3D(size, contrast)
	p := &problem{
		name:      fmt.Sprintf("heat-spreader block (jump3d, %d³ grid, contrast %g)", size, contrast),
		a:         a,
		symmetric: true, // Jump3D is symmetric by construction (see its doc)
		bs:        [][]float64{stencil.Ones(a)},
		rhs:       "heat sources for a uniform 1 K temperature rise (b = A·1), so the exact solution is all ones",
		ones:      true,
	}
	built := time.Since(start)
	if !o.json {
		fmt.Fprintf(e.stdout, "Heat-spreader test block: copper and epoxy cubes in a 2×2×2 checkerboard, conductivity ratio %g.\n", contrast)
		fmt.Fprintf(e.stdout, "Grid of %d³ points: %d unknowns, %d nonzeros, built in %s. Solving for the temperatures...\n\n",
			size, a.Rows, a.NNZ(), formatDuration(built))
	}
	return solveLocal(ctx, e, p, req, o)
}
