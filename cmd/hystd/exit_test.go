package main

import "testing"

// TestUsageExit: every command answers an unknown flag with exit status 2
// (README "Exit status").
func TestUsageExit(t *testing.T) {
	for _, c := range newRoot().Commands() {
		if c.Name() == "help" {
			continue
		}
		args := []string{c.Name(), "--no-such-flag"}
		if c.HasSubCommands() {
			args = []string{c.Name(), c.Commands()[0].Name(), "--no-such-flag"}
		}
		if _, errs, code := runCmd(t, args...); code != exitUsage {
			t.Errorf("hystd %v: exit %d, want %d (%s)", args, code, exitUsage, errs)
		}
	}
	if _, _, code := runCmd(t, "version", "extra-arg"); code != exitUsage {
		t.Errorf("version with an argument: exit %d, want %d", code, exitUsage)
	}
}
