package client_test

import (
	"context"
	"fmt"
	"log"
	"time"

	"github.com/residua/residua/client"
	"github.com/residua/residua/solve"
)

// A simulation code uploads its stiffness matrix once, then solves a load
// case per time step with a warm start, reporting progress as it goes.
// (Not run as a test: it needs a server at 127.0.0.1:7447.)
func ExampleClient_Solve() {
	ctx := context.Background()
	c, err := client.Dial(ctx, "127.0.0.1:7447", client.WithTokenFile("/etc/residua/token"))
	if err != nil {
		log.Fatal(err)
	}
	defer c.Close()
	m, err := c.UploadFile(ctx, "heat-sink-block.mtx", "")
	if err != nil {
		log.Fatal(err)
	}
	load := make([]float64, m.GetRows())
	var x []float64
	for step := range 3 {
		for i := range load {
			load[i] = float64(step + 1)
		}
		req := client.SolveRequest{MatrixID: m.GetId(), B: [][]float64{load},
			Request: solve.Request{RelTol: 1e-10}, ProgressInterval: time.Second}
		if x != nil {
			req.X0 = [][]float64{x}
		}
		out, err := c.Solve(ctx, req, func(e client.Event) {
			if p := e.Progress; p != nil {
				fmt.Printf("step %d: iteration %d, relative residual %.2e\n", step, p.Iteration, p.RelResidual)
			}
		})
		if err != nil {
			log.Fatal(err)
		}
		r := out.Results[0]
		fmt.Printf("step %d: %s\n", step, r.Headline)
		x = out.X[0]
	}
}
