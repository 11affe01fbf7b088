package solve

import (
	"crypto/sha256"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/residua/residua/krylov"
	"github.com/residua/residua/precond"
	"github.com/residua/residua/precond/amg"
	"github.com/residua/residua/sparse"
)

// Request is what a user asks of one solve, whichever front end it came
// through. Every number's zero value means its default, documented on the
// field; Validate refuses the values no method accepts.
type Request struct {
	// LeastSquares asks for min ‖A·x − b‖₂² + Damp²·‖x‖₂² instead of the
	// system A·x = b. Method LSQR or CGLS implies it.
	LeastSquares bool
	// Method is the iteration; "" or Auto lets residua choose (CG for a
	// system, LSQR for least squares).
	Method Method
	// Preconditioner names the preconditioner of a system (a precond.Kind:
	// "auto", "none", "jacobi", "ic0", ...) or the column scaling of a
	// least-squares problem (a krylov.Scaling: "auto", "colscale",
	// "none"). "" means "auto".
	Preconditioner string

	// RelTol and AbsTol are a system's stopping test on the true residual,
	// ‖b − A·x‖₂ ≤ max(RelTol·‖b‖₂, AbsTol). Defaults: RelTol 1e-8
	// (krylov.DefaultRelTol), AbsTol 0. Least squares takes neither.
	RelTol, AbsTol float64
	// ATol and BTol are the relative tolerances of Paige and Saunders'
	// stopping rules for least squares (‖r‖ ≤ BTol·‖b‖ + ATol·‖A‖·‖x‖, or
	// ‖Aᵀr‖ ≤ ATol·‖A‖·‖r‖); default 1e-8 each (krylov.DefaultLSQTol).
	// Damp is the damping λ ≥ 0, default 0. A system takes none of them.
	ATol, BTol, Damp float64
	// MaxIter caps the iterations; default 10·n for a system, 10·min(m, n)
	// (10·n when damped) for least squares.
	MaxIter int
	// TimeLimit is a wall-time budget for the iterations; default none.
	TimeLimit time.Duration
	// RefreshEvery is how often a system's true residual is recomputed
	// to watch the recursive one's drift; default 50; negative turns the
	// periodic refresh off.
	RefreshEvery int

	// auto records that Validate resolved Method from Auto, so that
	// Prepare may still switch a system to MINRES (see Auto).
	auto bool
	// AMG holds the multigrid options, taken by Preconditioner "amg" (and
	// by "auto" when it chooses AMG); the zero value gives every default.
	AMG AMGOptions
}

// AMGOptions are a request's smoothed-aggregation settings (precond/amg
// documents each and its default).
type AMGOptions struct {
	// Theta is the strength threshold θ, 0 < θ < 1; 0 means 0.08.
	Theta float64
	// Smoother is "chebyshev" (default, also "") or "l1jacobi".
	Smoother string
	// Degree is the Chebyshev degree, 1 to 8; 0 means 2.
	Degree int
	// NearNull is the near-null space; nil means the constant vector. (A
	// pointer keeps Request comparable.)
	NearNull *NearNull
	// BlockSize is the number of consecutive unknowns per node (3 for 3D
	// elasticity); 0 means 1.
	BlockSize int
}

// NearNull is a near-null space of K vectors, row-major: row i's entries
// are Values[i·K : (i+1)·K].
type NearNull struct {
	K      int
	Values []float64
}

// set reports whether any option differs from its default.
func (o AMGOptions) set() bool {
	return o.Theta != 0 || o.Smoother != "" || o.Degree != 0 || o.NearNull != nil || o.BlockSize != 0
}

// options returns the options in precond/amg's form.
func (o AMGOptions) options() amg.Options {
	opt := amg.Options{Theta: o.Theta, Smoother: amg.Smoother(o.Smoother), Degree: o.Degree, BlockSize: o.BlockSize}
	if o.NearNull != nil {
		opt.NearNull, opt.K = o.NearNull.Values, o.NearNull.K
	}
	return opt
}

// Key returns a string that identifies the options, for caching a set-up:
// two requests with the same key build the same preconditioner. The
// near-null space enters by its SHA-256.
func (o AMGOptions) Key() string {
	if !o.set() {
		return ""
	}
	h := sha256.New()
	k := 0
	if o.NearNull != nil {
		k = o.NearNull.K
		var buf [8]byte
		for _, v := range o.NearNull.Values {
			binary.LittleEndian.PutUint64(buf[:], math.Float64bits(v))
			h.Write(buf[:])
		}
	}
	return fmt.Sprintf("amg θ=%g smoother=%s degree=%d block=%d k=%d nearnull=%x", o.Theta, o.Smoother, o.Degree, o.BlockSize, k, h.Sum(nil)[:12])
}

func (o AMGOptions) validate(preconditioner string) error {
	if !o.set() {
		return nil
	}
	if preconditioner != string(precond.KindAMG) && preconditioner != string(precond.KindAuto) {
		return fieldErr("amg", "multigrid options apply to preconditioner amg (or auto), not %s", preconditioner)
	}
	switch {
	case !(o.Theta >= 0 && o.Theta < 1):
		return fieldErr("amg_theta", "%v must be in [0, 1) (0 means the default 0.08)", o.Theta)
	case o.Smoother != "" && o.Smoother != string(amg.Chebyshev) && o.Smoother != string(amg.L1Jacobi):
		return fieldErr("amg_smoother", "unknown smoother %q (want chebyshev or l1jacobi)", o.Smoother)
	case o.Degree < 0 || o.Degree > amg.MaxDegree:
		return fieldErr("amg_degree", "%d must be 1 to %d (0 means the default 2)", o.Degree, amg.MaxDegree)
	case o.BlockSize < 0:
		return fieldErr("amg_block_size", "%d must not be negative (0 means 1)", o.BlockSize)
	case o.NearNull == nil:
		return nil
	case o.NearNull.K < 1 || o.NearNull.K > 64:
		return fieldErr("near_null", "%d vectors, want 1 to 64", o.NearNull.K)
	case len(o.NearNull.Values)%o.NearNull.K != 0:
		return fieldErr("near_null", "%d entries are not a whole number of rows of %d vectors", len(o.NearNull.Values), o.NearNull.K)
	}
	k := o.NearNull.K
	for i, v := range o.NearNull.Values {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return fieldErr("near_null", "row %d, vector %d is %v", i/k+1, i%k+1, v)
		}
	}
	return nil
}

// FieldError is a request setting that Validate refused. Field is the
// setting's stable snake-case name ("rtol", "max_iter", "preconditioner",
// ...), which the command line shows as a flag (--rtol, --max-iter) and the
// server as the request field; Err says why. errors.Is(err, ErrInvalid)
// holds for every FieldError.
type FieldError struct {
	Field string
	Err   error
}

func (e *FieldError) Error() string        { return e.Field + ": " + e.Err.Error() }
func (e *FieldError) Unwrap() error        { return e.Err }
func (e *FieldError) Is(target error) bool { return target == ErrInvalid }

// ErrInvalid: a request setting was refused (see FieldError).
var ErrInvalid = errors.New("invalid setting")

func fieldErr(field, format string, args ...any) error {
	return &FieldError{Field: field, Err: fmt.Errorf(format, args...)}
}

// Validate checks r and returns it normalised: Method resolved from Auto to
// the method that will run, LeastSquares set when the method implies it,
// and Preconditioner "" replaced by "auto". It refuses, with a *FieldError,
// an unknown method or preconditioner, a negative, NaN or infinite number,
// and a setting that the kind of problem does not take.
func (r Request) Validate() (Request, error) {
	m, err := ParseMethod(string(r.Method))
	if err != nil {
		return r, &FieldError{Field: "method", Err: err}
	}
	if m.LeastSquares() {
		r.LeastSquares = true
	}
	switch {
	case m == Auto && r.LeastSquares:
		m = LSQR
	case m == Auto:
		m = CG
		r.auto = true
	case m == CG && r.LeastSquares:
		return r, fieldErr("method", "cg solves systems; least squares uses lsqr or cgls")
	case m == MINRES && r.LeastSquares:
		return r, fieldErr("method", "minres solves symmetric systems; least squares uses lsqr or cgls")
	}
	r.Method = m
	if r.Preconditioner == "" {
		r.Preconditioner = "auto"
	}
	if r.LeastSquares {
		if _, err := krylov.ParseScaling(r.Preconditioner); err != nil {
			return r, &FieldError{Field: "preconditioner", Err: err}
		}
	} else if k, err := precond.ParseKind(r.Preconditioner); err != nil {
		return r, &FieldError{Field: "preconditioner", Err: trimPackage(err)}
	} else if k == precond.KindBlock && r.auto {
		r.Method = MINRES // only MINRES takes the saddle-point preconditioner
	} else if k == precond.KindBlock && m == CG {
		return r, fieldErr("preconditioner", "block (the saddle-point preconditioner) is for minres; conjugate gradients needs a positive definite matrix, which a saddle-point matrix is not")
	}
	if err := r.AMG.validate(r.Preconditioner); err != nil {
		return r, err
	}
	for _, f := range []struct {
		name string
		v    float64
	}{{"rtol", r.RelTol}, {"atol", r.AbsTol}, {"atol", r.ATol}, {"btol", r.BTol}, {"damp", r.Damp}} {
		if !(f.v >= 0) || math.IsInf(f.v, 0) {
			return r, fieldErr(f.name, "%v must be a finite number ≥ 0", f.v)
		}
	}
	switch {
	case r.MaxIter < 0:
		return r, fieldErr("max_iter", "%d must not be negative (0 means the default)", r.MaxIter)
	case r.TimeLimit < 0:
		return r, fieldErr("time_limit", "%v must not be negative (0 means none)", r.TimeLimit)
	case r.LeastSquares && r.RelTol != 0:
		return r, fieldErr("rtol", "least squares stops by atol and btol (Paige and Saunders' rules), not rtol")
	case r.LeastSquares && r.AbsTol != 0:
		return r, fieldErr("atol", "an absolute residual tolerance applies to a system; least squares' atol is relative to ‖A‖ (Request.ATol)")
	case !r.LeastSquares && r.BTol != 0:
		return r, fieldErr("btol", "applies to least squares only, not to a system")
	case !r.LeastSquares && r.Damp != 0:
		return r, fieldErr("damp", "applies to least squares only, not to a system")
	case !r.LeastSquares && r.ATol != 0:
		return r, fieldErr("atol", "a system's absolute tolerance is Request.AbsTol; ATol is least squares' relative one")
	case r.LeastSquares && r.RefreshEvery != 0:
		return r, fieldErr("refresh_every", "applies to conjugate gradients only")
	}
	return r, nil
}

// MethodAsked returns the method as the user asked for it: Auto when
// Validate resolved Method from Auto (which may still become MINRES when
// the matrix is seen), else Method. A front end that sends a validated
// request on (to a server) sends this, so that the automatic choice is
// made where the matrix is.
func (r Request) MethodAsked() Method {
	if r.auto {
		return Auto
	}
	return r.Method
}

// SetupKey names what a set-up built for the validated request r depends
// on besides the matrix: the method (with whether it was chosen
// automatically, since the automatic choice may switch to MINRES) and the
// preconditioner. A server caching set-ups keys them by it.
func (r Request) SetupKey() string {
	m := string(r.Method)
	if r.auto {
		m = string(Auto) + "→" + m
	}
	return m + "/" + r.Preconditioner
}

// trimPackage drops a "precond: " prefix from a lower package's message,
// which a user should not have to read.
func trimPackage(err error) error {
	msg := err.Error()
	for _, p := range []string{"precond: ", "krylov: ", "stencil: "} {
		if len(msg) > len(p) && msg[:len(p)] == p {
			return errors.New(msg[len(p):])
		}
	}
	return err
}

// The ways a matrix can be wrong for a method, for errors.Is. The command
// line maps ErrNotSquare to a usage error and ErrNotSymmetric to a
// breakdown; the server maps both to FAILED_PRECONDITION.
var (
	// ErrNotSquare: a system solve on a rectangular matrix.
	ErrNotSquare = errors.New("not square")
	// ErrNotSymmetric: conjugate gradients on a matrix that is not
	// symmetric within sparse.SymmetryTolerance.
	ErrNotSymmetric = errors.New("not symmetric")
)

// Matrix is a matrix with what is known of its symmetry, as a front end
// has it: from the file's header, an upload's report, or Check.
type Matrix struct {
	A *sparse.CSR
	// Name names it for messages (a file name).
	Name string
	// Symmetric: square and numerically symmetric within
	// sparse.SymmetryTolerance. Asymmetry says, when it is not, which pair
	// of entries shows it, in words.
	Symmetric bool
	Asymmetry string
}

// Check describes a's symmetry. headerSymmetric says the file stored one
// triangle (so a is symmetric by construction and is not read again).
func Check(a *sparse.CSR, name string, headerSymmetric bool) Matrix {
	m := Matrix{A: a, Name: name}
	if a.Rows != a.Cols {
		m.Asymmetry = fmt.Sprintf("is %d×%d, not square", a.Rows, a.Cols)
		return m
	}
	if headerSymmetric {
		m.Symmetric = true
		return m
	}
	m.Symmetric, m.Asymmetry = Symmetry(sparse.Analyze(a, sparse.SymmetryTolerance))
	return m
}

// Symmetry reads a report's verdict on symmetry, with the worst pair in
// words (1-based indices, as a person counts rows) when it fails.
func Symmetry(r sparse.Report) (bool, string) {
	switch {
	case !r.Square:
		return false, fmt.Sprintf("is %d×%d, not square", r.Rows, r.Cols)
	case r.Symmetric:
		return true, ""
	case r.WorstPair != nil:
		w := r.WorstPair
		return false, fmt.Sprintf("is not symmetric: a(%d,%d) = %s but a(%d,%d) = %s",
			w.Row+1, w.Col+1, ShortFloat(w.Aij), w.Col+1, w.Row+1, ShortFloat(w.Aji))
	}
	return false, "is not symmetric"
}

// Applies checks that the (validated) request's method can solve m, with
// errors wrapping ErrNotSquare or ErrNotSymmetric.
func (r Request) Applies(m Matrix) error {
	if r.LeastSquares {
		return nil
	}
	a := m.A
	if a.Rows != a.Cols {
		return fmt.Errorf("%w: %s is %d×%d; a system solve needs a square matrix (least squares solves min ‖A·x − b‖ for any shape: residua lsq, or method lsqr)",
			ErrNotSquare, m.Name, a.Rows, a.Cols)
	}
	if !m.Symmetric {
		why := m.Asymmetry
		if why == "" {
			why = "is not symmetric"
		}
		needs := "conjugate gradients needs a symmetric positive definite matrix"
		if r.Method == MINRES {
			needs = "MINRES needs a symmetric matrix"
		}
		return fmt.Errorf("%w: %s %s; %s (least squares, residua lsq or method lsqr, solves the normal equations AᵀA·x = Aᵀb instead)",
			ErrNotSymmetric, m.Name, why, needs)
	}
	return nil
}
