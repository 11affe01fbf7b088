package main

import (
	"os"
	"regexp"
	"strings"
	"testing"
)

// The README promises two set-up commands, and CI (.ci/run) must call the
// README's test command verbatim; every subcommand must be documented in the
// README's usage. These checks keep the three in step.
func TestReadmeMatchesCI(t *testing.T) {
	readme, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	ci, err := os.ReadFile("../../.ci/run")
	if err != nil {
		t.Fatal(err)
	}
	// The set-up block is the first fenced block: the main job, then the tests.
	block := regexp.MustCompile("(?s)```sh\n(.*?)```").FindSubmatch(readme)
	if block == nil {
		t.Fatal("README has no ```sh block with the set-up commands")
	}
	var cmds []string
	for _, line := range strings.Split(string(block[1]), "\n") {
		if cmd, _, _ := strings.Cut(line, "#"); strings.TrimSpace(cmd) != "" {
			cmds = append(cmds, strings.TrimSpace(cmd))
		}
	}
	if len(cmds) != 2 {
		t.Fatalf("README set-up block has %d commands %q, want 2 (main job, tests)", len(cmds), cmds)
	}
	if cmds[0] != "go run ./cmd/residua demo" {
		t.Errorf("README main-job command = %q, want the demo", cmds[0])
	}
	found := false
	for _, line := range strings.Split(string(ci), "\n") {
		if strings.TrimSpace(line) == cmds[1] {
			found = true
		}
	}
	if !found {
		t.Errorf(".ci/run has no line %q (the README's test command)", cmds[1])
	}
	for _, c := range commands {
		if !strings.Contains(string(readme), "residua "+c.name) {
			t.Errorf("README does not document `residua %s`", c.name)
		}
	}
}
