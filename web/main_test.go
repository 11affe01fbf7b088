package web

import (
	"testing"

	"github.com/residua/residua/internal/shared"
)

// TestMain prints, after the tests, one line saying which checks were
// skipped for a missing outside piece and why (see shared.Main).
func TestMain(m *testing.M) { shared.Main(m) }
