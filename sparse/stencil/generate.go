package stencil

import (
	"fmt"
	"math"

	"github.com/residua/residua/sparse"
)

// Defaults that Generate uses for the problems with extra parameters.
const (
	// DefaultKX, DefaultKY and DefaultKZ are anisotropic3d's diffusion
	// coefficients along x, y and z: four orders of magnitude from x to z.
	DefaultKX = 1.0
	DefaultKY = 1e-2
	DefaultKZ = 1e-4
	// DefaultContrast is jump3d's ratio between the two blocks' coefficients.
	DefaultContrast = 1e4
)

// Names lists the problem names Generate accepts, in a stable order.
func Names() []string {
	return []string{"poisson2d", "poisson3d", "stencil27", "anisotropic3d", "jump3d", "elasticity3d"}
}

// Generate builds the named model problem with n grid points per side:
// "poisson2d" (Poisson2D), "poisson3d" (Poisson3D), "stencil27" (Stencil27),
// "anisotropic3d" (Anisotropic3D with DefaultKX, DefaultKY, DefaultKZ) or
// "jump3d" (Jump3D with DefaultContrast) or "elasticity3d" (Elasticity3D
// with n elements per side, DefaultYoung and DefaultPoisson). It returns an error, rather than
// panicking, for an unknown name, n < 1 or a grid with more than
// sparse.MaxDim points, since these come from users.
func Generate(name string, n int) (*sparse.CSR, error) {
	dim := 3
	switch name {
	case "poisson2d":
		dim = 2
	case "poisson3d", "stencil27", "anisotropic3d", "jump3d":
	case "elasticity3d":
		if n < 1 || 3*float64(n)*float64(n+1)*float64(n+1) > sparse.MaxDim {
			return nil, fmt.Errorf("stencil: elasticity3d with %d elements per side must have 1 to %d unknowns", n, sparse.MaxDim)
		}
		return Elasticity3D(n, DefaultYoung, DefaultPoisson), nil
	default:
		return nil, fmt.Errorf("stencil: unknown problem %q (known: %v)", name, Names())
	}
	if n < 1 {
		return nil, fmt.Errorf("stencil: grid side %d must be at least 1", n)
	}
	if float64(n) > math.Pow(sparse.MaxDim, 1/float64(dim)) {
		return nil, fmt.Errorf("stencil: %s with side %d has more than %d unknowns", name, n, sparse.MaxDim)
	}
	switch name {
	case "poisson2d":
		return Poisson2D(n), nil
	case "poisson3d":
		return Poisson3D(n), nil
	case "stencil27":
		return Stencil27(n), nil
	case "anisotropic3d":
		return Anisotropic3D(n, DefaultKX, DefaultKY, DefaultKZ), nil
	default:
		return Jump3D(n, DefaultContrast), nil
	}
}
