package stencil

import (
	"fmt"
	"math"

	"github.com/residua/residua/sparse"
)

// Defaults of Elasticity3D's material, a made-up steel-like block in units
// where the block's side is 1.
const (
	DefaultYoung   = 1.0
	DefaultPoisson = 0.3
)

// Elasticity3D returns the stiffness matrix of 3D linear elasticity on the
// unit cube cut into n×n×n equal trilinear hexahedral (Q1, eight-node brick)
// elements, with the face x = 0 clamped (its nodes' displacements are zero
// and eliminated) and the other faces free, for an isotropic material of
// Young's modulus e and Poisson's ratio nu.
//
// The element matrix is K_e = ∫ Bᵀ·D·B dV over one brick, by 2×2×2 Gauss
// quadrature (exact for the trilinear element on a box), with B the
// strain-displacement matrix of the trilinear shape functions and D the
// isotropic elasticity matrix in Voigt order (εxx, εyy, εzz, γxy, γyz,
// γxz) with Lamé constants λ = eν/((1+ν)(1−2ν)) and μ = e/(2(1+ν)):
// T. J. R. Hughes, The Finite Element Method: Linear Static and Dynamic
// Finite Element Analysis, 1987, ch. 2 and 3 (chapter numbers from
// memory). All elements are the same box, so K_e is computed once; the
// global matrix is its sum over elements (FromTriplets sums duplicates in
// element order, so the result is deterministic).
//
// Unknowns: the node at grid position (i, j, k), 1 ≤ i ≤ n, 0 ≤ j, k ≤ n
// (i = 0 is the clamped face) at coordinates (i, j, k)/n is node
// (i−1) + n·(j + (n+1)·k), and its displacements along x, y, z are rows
// 3·node, 3·node+1, 3·node+2: three consecutive unknowns per node, for
// multigrid's block size 3. The matrix has 3·n·(n+1)² rows and is
// symmetric positive definite (the clamped face removes the rigid-body
// motions). Panics if n < 1, the size overflows, or e ≤ 0 or ν is outside
// (−1, 0.5).
func Elasticity3D(n int, e, nu float64) *sparse.CSR {
	checkSide(n)
	checkCoef("Young's modulus", e)
	if !(nu > -1 && nu < 0.5) {
		panic(fmt.Sprintf("stencil: Poisson's ratio %v outside (-1, 0.5)", nu))
	}
	rows := 3 * n * (n + 1) * (n + 1)
	if float64(n)*float64(n+1)*float64(n+1)*3 > sparse.MaxDim {
		panic(fmt.Sprintf("stencil: elasticity3d with %d elements per side has more than %d unknowns", n, sparse.MaxDim))
	}
	ke := brickStiffness(1/float64(n), e, nu)
	m := n + 1
	node := func(i, j, k int) int { return (i - 1) + n*(j+m*k) }
	elems := n * n * n
	ti := make([]int32, 0, elems*576)
	tj := make([]int32, 0, elems*576)
	tv := make([]float64, 0, elems*576)
	var dofs [24]int // −1 for a clamped node's displacements
	for k := range n {
		for j := range n {
			for i := range n {
				for a, c := range brickCorners {
					ii, jj, kk := i+c[0], j+c[1], k+c[2]
					for d := range 3 {
						if ii == 0 {
							dofs[3*a+d] = -1
						} else {
							dofs[3*a+d] = 3*node(ii, jj, kk) + d
						}
					}
				}
				for r, gr := range dofs {
					if gr < 0 {
						continue
					}
					for c, gc := range dofs {
						if gc < 0 {
							continue
						}
						ti = append(ti, int32(gr))
						tj = append(tj, int32(gc))
						tv = append(tv, ke[r*24+c])
					}
				}
			}
		}
	}
	a, _, err := sparse.FromTriplets(rows, rows, ti, tj, tv, sparse.BuildOptions{})
	if err != nil {
		panic("stencil: elasticity3d assembly: " + err.Error()) // indices are in range by construction
	}
	return a
}

// brickCorners are the corner offsets of a brick in the local node order
// of the trilinear element; brickSigns the same as ±1 reference
// coordinates.
var brickCorners = [8][3]int{{0, 0, 0}, {1, 0, 0}, {1, 1, 0}, {0, 1, 0}, {0, 0, 1}, {1, 0, 1}, {1, 1, 1}, {0, 1, 1}}

// brickStiffness returns the 24×24 element stiffness matrix (row-major;
// local unknown 3a+d is corner a's displacement along d) of a cube of side
// h, by 2×2×2 Gauss quadrature.
func brickStiffness(h, e, nu float64) []float64 {
	lam := e * nu / ((1 + nu) * (1 - 2*nu))
	mu := e / (2 * (1 + nu))
	var dm [6][6]float64
	for r := range 3 {
		for c := range 3 {
			dm[r][c] = lam
		}
		dm[r][r] = lam + 2*mu
		dm[r+3][r+3] = mu
	}
	ke := make([]float64, 24*24)
	g := 1 / math.Sqrt(3)
	detJ := h * h * h / 8 // the map from [−1, 1]³ to the brick scales each axis by h/2
	for _, xi := range []float64{-g, g} {
		for _, eta := range []float64{-g, g} {
			for _, zeta := range []float64{-g, g} {
				// B is 6×24.
				var b [6][24]float64
				for a, c := range brickCorners {
					sx, sy, sz := float64(2*c[0]-1), float64(2*c[1]-1), float64(2*c[2]-1)
					// ∂N_a/∂x = (2/h)·∂N_a/∂ξ, N_a = (1+sxξ)(1+syη)(1+szζ)/8.
					nx := sx * (1 + sy*eta) * (1 + sz*zeta) / 8 * 2 / h
					ny := sy * (1 + sx*xi) * (1 + sz*zeta) / 8 * 2 / h
					nz := sz * (1 + sx*xi) * (1 + sy*eta) / 8 * 2 / h
					u, v, w := 3*a, 3*a+1, 3*a+2
					b[0][u] = nx
					b[1][v] = ny
					b[2][w] = nz
					b[3][u], b[3][v] = ny, nx
					b[4][v], b[4][w] = nz, ny
					b[5][u], b[5][w] = nz, nx
				}
				// K_e += Bᵀ·D·B·detJ (Gauss weights 1).
				var db [6][24]float64
				for r := range 6 {
					for c := range 24 {
						s := 0.0
						for q := range 6 {
							s += dm[r][q] * b[q][c]
						}
						db[r][c] = s
					}
				}
				for r := range 24 {
					for c := range 24 {
						s := 0.0
						for q := range 6 {
							s += b[q][r] * db[q][c]
						}
						ke[r*24+c] += s * detJ
					}
				}
			}
		}
	}
	// Bᵀ·D·B sums its (r, c) and (c, r) entries in different orders: make
	// the element matrix symmetric bit for bit, so that the assembled
	// matrix is too (both triangles summed over the same elements in the
	// same order).
	for r := range 24 {
		for c := r + 1; c < 24; c++ {
			v := (ke[r*24+c] + ke[c*24+r]) / 2
			ke[r*24+c], ke[c*24+r] = v, v
		}
	}
	return ke
}

// RigidBodyModes returns the six rigid-body modes of Elasticity3D(n, ...)
// at its unknowns, row-major with six entries a row: the translations along
// x, y and z, and the rotations about the z, x and y axes through the
// origin, u = ω × r for the node's position r = (x, y, z): (−y, x, 0),
// (0, −z, y) and (z, 0, −x). They are the near-null space that smoothed
// aggregation needs for elasticity (Vaněk, Mandel and Brezina 1996, §5):
// they give zero strain, so K times each is zero except at the rows next
// to the clamped face.
func RigidBodyModes(n int) []float64 {
	checkSide(n)
	m := n + 1
	h := 1 / float64(n)
	out := make([]float64, 3*n*m*m*6)
	for k := range m {
		for j := range m {
			for i := 1; i <= n; i++ {
				x, y, z := float64(i)*h, float64(j)*h, float64(k)*h
				nd := (i - 1) + n*(j+m*k)
				rx := out[(3*nd)*6 : (3*nd+1)*6]
				ry := out[(3*nd+1)*6 : (3*nd+2)*6]
				rz := out[(3*nd+2)*6 : (3*nd+3)*6]
				rx[0], ry[1], rz[2] = 1, 1, 1
				rx[3], ry[3] = -y, x
				ry[4], rz[4] = -z, y
				rx[5], rz[5] = z, -x
			}
		}
	}
	return out
}
