// Command hystd is a daemon for DC magnetic hysteresis (B–H loop)
// measurement. This package only wires commands to the packages that do the
// work; each command lives in its own file and registers itself.
package main

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/signal"
	"sort"
	"strings"
	"syscall"

	"github.com/spf13/cobra"

	"hystd/buildinfo"
)

// version is what the program records as its software: version, VCS
// revision, modified flag and Go version (package buildinfo; releases set
// them with -ldflags "-X hystd/buildinfo.Version=...").
var version = buildinfo.Read().Software()

// commands holds the constructors registered by the command files.
var commands []func() *cobra.Command

// register adds a command constructor; call it from an init function.
func register(c func() *cobra.Command) { commands = append(commands, c) }

func newRoot() *cobra.Command {
	root := &cobra.Command{
		Use:           "hystd",
		Short:         "DC B–H loop measurement daemon",
		Version:       version,
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	var subs []*cobra.Command
	for _, c := range commands {
		subs = append(subs, c())
	}
	sort.Slice(subs, func(i, j int) bool { return subs[i].Name() < subs[j].Name() })
	root.AddCommand(subs...)
	usageExits(root)
	return root
}

// Exit statuses (README "Exit status"): 0, 1 and 2 mean the same in every
// command; 3 and up are named per command.
const (
	exitOK        = 0
	exitFailed    = 1 // an error: bad input file, I/O, refused
	exitUsage     = 2 // unknown command or flag, wrong arguments, bad flag value
	exitRunFailed = 3 // run: the run failed
	exitAborted   = 4 // run: the run was aborted (signal or API)
	exitNotFound  = 3 // export: no such run or loop
)

// usageExits makes every flag or argument error of c and its subcommands exit
// with status 2.
func usageExits(c *cobra.Command) {
	c.SetFlagErrorFunc(func(_ *cobra.Command, err error) error {
		return &exitError{code: exitUsage, err: err}
	})
	if args := c.Args; args != nil {
		c.Args = func(cmd *cobra.Command, a []string) error {
			if err := args(cmd, a); err != nil {
				return &exitError{code: exitUsage, err: err}
			}
			return nil
		}
	}
	for _, s := range c.Commands() {
		usageExits(s)
	}
}

// exitError carries a process exit code through cobra.
type exitError struct {
	code int
	err  error
}

func (e *exitError) Error() string { return e.err.Error() }
func (e *exitError) Unwrap() error { return e.err }

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	err := newRoot().ExecuteContext(ctx)
	if err == nil {
		return
	}
	fmt.Fprintln(os.Stderr, "hystd:", err)
	var ee *exitError
	if errors.As(err, &ee) {
		os.Exit(ee.code)
	}
	if strings.HasPrefix(err.Error(), "unknown command") || strings.HasPrefix(err.Error(), "required flag") {
		os.Exit(exitUsage)
	}
	os.Exit(exitFailed)
}
