//go:build linux

package monitor

import (
	"fmt"
	"io"
	"os"
	"strings"
	"syscall"
	"testing"
	"time"
	"unsafe"

	"github.com/residua/residua/krylov"
)

// openPTY opens a pseudo-terminal pair of cols × rows cells with the Linux
// ioctls (pty(7), ioctl_tty(2)): unlock the slave of /dev/ptmx, read its
// number, open it, set its window size.
func openPTY(t *testing.T, cols, rows int) (master, slave *os.File) {
	t.Helper()
	master, err := os.OpenFile("/dev/ptmx", os.O_RDWR|syscall.O_NOCTTY, 0)
	if err != nil {
		t.Skipf("no pseudo-terminals here: %v", err)
	}
	ioctl := func(f *os.File, req uintptr, arg unsafe.Pointer) {
		t.Helper()
		if _, _, errno := syscall.Syscall(syscall.SYS_IOCTL, f.Fd(), req, uintptr(arg)); errno != 0 {
			t.Fatalf("ioctl %#x: %v", req, errno)
		}
	}
	var unlock int32
	ioctl(master, syscall.TIOCSPTLCK, unsafe.Pointer(&unlock))
	var n uint32
	ioctl(master, syscall.TIOCGPTN, unsafe.Pointer(&n))
	slave, err = os.OpenFile(fmt.Sprintf("/dev/pts/%d", n), os.O_RDWR|syscall.O_NOCTTY, 0)
	if err != nil {
		t.Fatal(err)
	}
	ws := struct{ Row, Col, X, Y uint16 }{uint16(rows), uint16(cols), 0, 0}
	ioctl(slave, syscall.TIOCSWINSZ, unsafe.Pointer(&ws))
	return master, slave
}

// Through a real pseudo-terminal: Auto mode finds a terminal, reads its
// size with golang.org/x/term, draws the panel to that width, and leaves
// the summary at the end (issue 5, section 5). The terminal's output
// processing turns each "\n" into "\r\n", which the fake screen takes as
// a terminal would.
func TestPanelThroughPseudoTerminal(t *testing.T) {
	master, slave := openPTY(t, 100, 30)
	scr := newScreen(t, 100, 30)
	copied := make(chan struct{})
	go func() {
		defer close(copied)
		io.Copy(scr, master) // ends with EIO once the slave is closed
	}()
	m := New(slave, Options{Target: 1e-8, Preconditioner: "ic0", Redraw: 2 * time.Millisecond,
		Summary: func(w io.Writer, r *krylov.Result) { fmt.Fprintf(w, "done: %s\n", r.Status) }})
	if m.Mode() != Panel {
		t.Fatalf("mode %v on a pseudo-terminal, want panel", m.Mode())
	}
	for k := 0; k <= 80; k++ {
		m.Record(geometric(k, 0.8))
	}
	waitFor(t, scr, "iteration 80")
	// The x axis spans the width less the labels and one spare column:
	// 100 − 1 − 7 = 92 cells.
	if got := scr.text(); !strings.Contains(got, "└"+strings.Repeat("─", 92)+"\n") || !hasBraille(got) {
		t.Errorf("panel at 100 columns:\n%s", got)
	}
	m.Finish(&krylov.Result{Status: krylov.Converged})
	waitFor(t, scr, "done: converged")
	slave.Close()
	master.Close()
	<-copied
	if got := scr.text(); got != "done: converged" {
		t.Errorf("after Finish:\n%s", got)
	}
}
