package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"runtime/debug"
	"slices"
	"sort"
	"strings"
)

// Exit statuses, documented in the package comment, in every command's
// --help and in the README.
const (
	exitOK           = 0
	exitFailure      = 1 // anything else
	exitUsage        = 2 // bad usage, unreadable or malformed input
	exitNotConverged = 3 // cap, time limit, stagnation, cancelled
	exitBreakdown    = 4 // not positive definite, NaN/Inf
)

// exitError carries the exit status an error maps to. quiet means the
// message has already been shown (for example a summary that says why the
// solve stopped), so main prints nothing more.
type exitError struct {
	code  int
	err   error
	quiet bool
}

func (e *exitError) Error() string { return e.err.Error() }
func (e *exitError) Unwrap() error { return e.err }

// usageErrorf reports bad usage: exit status 2.
func usageErrorf(format string, args ...any) error {
	return &exitError{code: exitUsage, err: fmt.Errorf(format, args...)}
}

// inputError marks err (unreadable or malformed input) for exit status 2.
func inputError(err error) error {
	if err == nil {
		return nil
	}
	return &exitError{code: exitUsage, err: err}
}

// exitStatus maps the error run returned to the process exit status and
// prints its message on stderr (unless it has been shown already).
func exitStatus(err error, stderr io.Writer) int {
	if err == nil {
		return exitOK
	}
	code := exitFailure
	var ee *exitError
	if errors.As(err, &ee) {
		code = ee.code
		if ee.quiet {
			return code
		}
	}
	fmt.Fprintf(stderr, "residua: %v\n", err)
	return code
}

// env is what a command may touch besides its arguments.
type env struct {
	stdin          io.Reader
	stdout, stderr io.Writer
}

// command is one subcommand of the residua binary.
type command struct {
	name    string
	summary string // one line for "residua help"
	run     func(ctx context.Context, e *env, args []string) error
}

// commands lists the subcommands in the order "residua help" shows them. It
// is filled by init functions in the commands' files.
var commands []*command

func register(c *command) { commands = append(commands, c) }

func lookup(name string) *command {
	for _, c := range commands {
		if c.name == name {
			return c
		}
	}
	return nil
}

// run is the whole program: it dispatches args[0] to a subcommand. It
// returns nil on success and otherwise an error that exitStatus maps to an
// exit status.
func run(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) error {
	e := &env{stdin: stdin, stdout: stdout, stderr: stderr}
	if len(args) == 0 {
		printOverview(stderr)
		return &exitError{code: exitUsage, err: errors.New("no command given"), quiet: true}
	}
	name := args[0]
	switch name {
	case "version", "--version", "-version":
		fmt.Fprintln(stdout, versionLine())
		return nil
	case "help", "-h", "-help", "--help":
		if len(args) > 1 && name == "help" {
			c := lookup(args[1])
			if c == nil {
				return usageErrorf("help: unknown command %q (run 'residua help')", args[1])
			}
			return runCommand(ctx, c, e, []string{"--help"})
		}
		printOverview(stdout)
		return nil
	}
	c := lookup(name)
	if c == nil {
		return usageErrorf("unknown command %q (run 'residua help' for the list)", name)
	}
	return runCommand(ctx, c, e, args[1:])
}

// runCommand runs c; a --help that c's flag parsing answered (errHelp) is
// success, so the commands just return parse's error.
func runCommand(ctx context.Context, c *command, e *env, args []string) error {
	if err := c.run(ctx, e, args); err != errHelp {
		return err
	}
	return nil
}

func printOverview(w io.Writer) {
	fmt.Fprintf(w, "residua solves sparse SPD systems and least-squares problems with Krylov methods.\n\n")
	fmt.Fprintf(w, "Usage: residua COMMAND [arguments and flags]\n\nCommands:\n")
	// The order a newcomer meets them in: the main job first, the service last.
	order := []string{"demo", "solve", "lsq", "inspect", "generate", "plot", "bench", "serve", "jobs", "watch", "cancel"}
	rank := func(name string) int {
		for i, n := range order {
			if n == name {
				return i
			}
		}
		return len(order)
	}
	sorted := append([]*command(nil), commands...)
	sort.SliceStable(sorted, func(i, j int) bool { return rank(sorted[i].name) < rank(sorted[j].name) })
	for _, c := range sorted {
		fmt.Fprintf(w, "  %-9s %s\n", c.name, c.summary)
	}
	fmt.Fprintf(w, "  %-9s %s\n", "help", "this text; 'residua help COMMAND' or 'residua COMMAND --help' for one command")
	fmt.Fprintf(w, "\n%s", exitStatusText)
}

// exitStatusText is the overview's table of exit statuses.
var exitStatusText = exitStatusHelp("0", "1", "2", "3", "4")

// exitMeanings says what each exit status means.
var exitMeanings = map[string]string{
	"0": "success (solve, lsq, watch: the answer met the tolerance)",
	"1": "anything else (I/O failure, server unreachable, internal error)",
	"2": "bad usage, or an unreadable or malformed input file (the message names file and line)",
	"3": "the solve stopped without converging: iteration cap, time limit, stagnation,\n     or cancelled (SIGINT/SIGTERM)",
	"4": "breakdown: the matrix or preconditioner is not positive definite, or NaN/Inf appeared",
}

// commandExits lists the exit statuses each command can return: only the
// solving ones report a solve's outcome (3 and 4).
var commandExits = map[string][]string{
	"solve": {"0", "1", "2", "3", "4"}, "lsq": {"0", "1", "2", "3", "4"}, "demo": {"0", "1", "2", "3", "4"},
	"watch": {"0", "1", "2", "3", "4"},
	// A server's refusal maps to the local failure's status (remoteError).
	"jobs": {"0", "1", "2", "3", "4"}, "cancel": {"0", "1", "2", "3", "4"},
}

// exitStatusHelp is the exit-status table of a command's help.
func exitStatusHelp(codes ...string) string {
	var b strings.Builder
	b.WriteString("Exit status:\n")
	for _, c := range codes {
		m := exitMeanings[c]
		if c == "0" && len(codes) == 3 {
			m = "success"
		}
		fmt.Fprintf(&b, "  %s  %s\n", c, m)
	}
	return b.String()
}

// exitsOf returns the exit statuses command name can return.
func exitsOf(name string) []string {
	if c, ok := commandExits[name]; ok {
		return c
	}
	return []string{"0", "1", "2"}
}

// cmdFlags is a subcommand's flag set with its help text.
type cmdFlags struct {
	*flag.FlagSet
	usage string // "residua solve A.mtx [flags]"
	about string // paragraphs after the usage line
}

func newFlags(name, usage, about string) *cmdFlags {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(io.Discard)
	return &cmdFlags{FlagSet: fs, usage: usage, about: about}
}

// errHelp is returned by parse when --help was asked for and printed; a
// command passes it on and runCommand turns it into success.
var errHelp = errors.New("help shown")

// parse parses args, allowing flags after positional arguments (flag stops at
// the first non-flag argument, so the remaining arguments are parsed again
// after each positional one); "--" ends the flags. On --help it prints the
// help on stdout and returns errHelp; on a bad flag a usage error.
func (f *cmdFlags) parse(e *env, args []string) ([]string, error) {
	var pos []string
	for {
		err := f.Parse(args)
		if errors.Is(err, flag.ErrHelp) {
			f.printHelp(e.stdout)
			return nil, errHelp
		}
		if err != nil {
			return nil, usageErrorf("%s: %s (run 'residua %s --help')", f.Name(), f.explain(err), f.Name())
		}
		rest := f.Args()
		used := len(args) - len(rest)
		if used > 0 && args[used-1] == "--" {
			return append(pos, rest...), nil
		}
		if len(rest) == 0 {
			return pos, nil
		}
		pos = append(pos, rest[0])
		args = rest[1:]
	}
}

// printHelp writes the command's usage, description, flags and exit statuses.
func (f *cmdFlags) printHelp(w io.Writer) {
	fmt.Fprintf(w, "Usage: %s\n\n", f.usage)
	if f.about != "" {
		fmt.Fprintf(w, "%s\n\n", strings.TrimSpace(f.about))
	}
	type row struct{ left, right string }
	var rows []row
	width := 0
	f.VisitAll(func(fl *flag.Flag) {
		name, usage := flag.UnquoteUsage(fl)
		dash := "--"
		if len(fl.Name) == 1 {
			dash = "-"
		}
		left := dash + fl.Name
		if name != "" {
			left += " " + name
		}
		if fl.DefValue != "" && fl.DefValue != "0" && fl.DefValue != "false" && fl.DefValue != "0s" {
			usage += " (default " + fl.DefValue + ")"
		}
		rows = append(rows, row{left, usage})
		width = max(width, len(left))
	})
	sort.SliceStable(rows, func(i, j int) bool {
		return strings.TrimLeft(rows[i].left, "-") < strings.TrimLeft(rows[j].left, "-")
	})
	if len(rows) > 0 {
		fmt.Fprintf(w, "Flags:\n")
		for _, r := range rows {
			fmt.Fprintf(w, "  %-*s  %s\n", width, r.left, r.right)
		}
		fmt.Fprintf(w, "  %-*s  %s\n\n", width, "-h, --help", "this text")
	}
	fmt.Fprint(w, exitStatusHelp(exitsOf(f.Name())...))
}

// explain turns the flag package's message into one that says what to do:
// a duration without a unit, an unknown flag close to a known one.
func (f *cmdFlags) explain(err error) string {
	msg := err.Error()
	if name, ok := strings.CutPrefix(msg, "flag provided but not defined: "); ok {
		name = strings.TrimLeft(name, "-")
		if near := f.nearest(name); near != "" {
			return fmt.Sprintf("unknown flag --%s; did you mean --%s?", name, near)
		}
		return fmt.Sprintf("unknown flag --%s", name)
	}
	for _, fl := range []string{"time-limit", "shutdown-grace", "stop-timeout"} {
		if strings.Contains(msg, "for flag -"+fl+":") {
			return fmt.Sprintf("--%s: a duration needs a unit, e.g. 10s, 5m or 1h30m (%v)", fl, strings.TrimPrefix(msg, "invalid value "))
		}
	}
	return strings.Replace(msg, "flag -", "flag --", 1)
}

// preferred breaks ties between equally close flags: a bare "tol" most
// likely means the relative tolerance.
var preferred = []string{"rtol", "precond", "max-iter", "history"}

// nearest returns the defined flag closest to name by edit distance, when
// it is close enough to be a likely slip (at most a third of the name's
// letters off), or "".
func (f *cmdFlags) nearest(name string) string {
	best, bestD := "", len(name)/3+1
	f.VisitAll(func(fl *flag.Flag) {
		d := editDistance(name, fl.Name)
		if d < bestD || (d == bestD && best != "" && slices.Contains(preferred, fl.Name) && !slices.Contains(preferred, best)) {
			best, bestD = fl.Name, d
		}
	})
	return best
}

// editDistance is the optimal-string-alignment distance between a and b:
// insertions, deletions, substitutions and swaps of adjacent bytes (the
// slips a typist makes) count one each.
func editDistance(a, b string) int {
	d := make([][]int, len(a)+1)
	for i := range d {
		d[i] = make([]int, len(b)+1)
		d[i][0] = i
	}
	for j := range d[0] {
		d[0][j] = j
	}
	for i := 1; i <= len(a); i++ {
		for j := 1; j <= len(b); j++ {
			cost := 1
			if a[i-1] == b[j-1] {
				cost = 0
			}
			d[i][j] = min(d[i-1][j]+1, d[i][j-1]+1, d[i-1][j-1]+cost)
			if i > 1 && j > 1 && a[i-1] == b[j-2] && a[i-2] == b[j-1] {
				d[i][j] = min(d[i][j], d[i-2][j-2]+1)
			}
		}
	}
	return d[len(a)][len(b)]
}

// versionLine says which residua this is: the module version and, for a
// build from a git checkout, the revision, its time and whether the tree
// had uncommitted changes (from the build information the go command
// records, runtime/debug.ReadBuildInfo).
func versionLine() string {
	bi, ok := debug.ReadBuildInfo()
	if !ok {
		return "residua (no build information)"
	}
	line := "residua " + bi.Main.Version
	settings := map[string]string{}
	for _, s := range bi.Settings {
		settings[s.Key] = s.Value
	}
	if rev := settings["vcs.revision"]; rev != "" {
		line += ", revision " + rev
		if t := settings["vcs.time"]; t != "" {
			line += " (" + t + ")"
		}
		if settings["vcs.modified"] == "true" {
			line += " with uncommitted changes"
		}
	}
	return line + ", " + bi.GoVersion
}
