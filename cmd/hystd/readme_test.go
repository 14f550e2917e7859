package main

import (
	"os"
	"regexp"
	"strings"
	"testing"

	"github.com/spf13/cobra"
)

// TestReadmeNamesEveryFlag: each flag a command's --help lists is named in
// README.md (the man pages are generated from the same commands; see
// TestPackage), and each command is in its table.
func TestReadmeNamesEveryFlag(t *testing.T) {
	b, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	readme := string(b)
	flagRe := regexp.MustCompile(`(?m)^\s+(?:-[a-zA-Z], )?(--[a-z][a-z0-9-]*)`)
	seen := 0
	var walk func(c *cobra.Command)
	walk = func(c *cobra.Command) {
		for _, s := range c.Commands() {
			if s.Hidden || s.Name() == "help" || s.Name() == "completion" {
				continue
			}
			path := strings.TrimPrefix(s.CommandPath(), "hystd ")
			if !strings.Contains(readme, "`hystd "+strings.Fields(path)[0]) {
				t.Errorf("README.md does not list hystd %s", path)
			}
			help, _, code := runCmd(t, append(strings.Fields(path), "--help")...)
			if code != 0 {
				t.Errorf("%s --help: exit %d", path, code)
			}
			for _, m := range flagRe.FindAllStringSubmatch(help, -1) {
				seen++
				if m[1] != "--help" && !strings.Contains(readme, m[1]) {
					t.Errorf("README.md does not name %s of hystd %s", m[1], path)
				}
			}
			walk(s)
		}
	}
	walk(newRoot())
	if seen < 20 {
		t.Fatalf("only %d flags found in the --help texts: the pattern no longer matches", seen)
	}
}
