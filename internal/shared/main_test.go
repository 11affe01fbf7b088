package shared

import "testing"

// TestMain prints the line of skipped checks (see Main).
func TestMain(m *testing.M) { Main(m) }
