package main

import (
	"slices"
	"strings"

	"github.com/urfave/cli/v2"
)

// hoistFlags moves each command's flags ahead of its positional arguments.
//
// The CLI library stops reading a command's flags at its first positional
// argument and hands the rest over as arguments, so `report --study s.yaml
// latest --out r.html` would silently write report.html. People (and the
// README) write flags after the run id, so the command line is put in the
// order the library reads instead: at every level, that level's flags (with
// their values) first, then its positionals, then the subcommand's own
// arguments. A "--" still ends flag reading: it and everything after it are
// kept as they are, after the positionals. A token at the top level that
// names no command is left, with everything after it, for the library to
// reject as it would.
func hoistFlags(args []string, app *cli.App) []string {
	if len(args) == 0 {
		return args
	}
	return append([]string{args[0]}, hoistLevel(args[1:], app.Flags, app.Commands, true)...)
}

// hoistLevel reorders the arguments of one command level. Flags not defined
// at that level are moved too and assumed to take no value; the library
// then rejects them, which is the error the user should see.
func hoistLevel(args []string, flags []cli.Flag, cmds []*cli.Command, top bool) []string {
	var fl, pos []string
	for i := 0; i < len(args); i++ {
		a := args[i]
		switch {
		case a == "--":
			return slices.Concat(fl, pos, args[i:])
		case len(a) > 1 && a[0] == '-':
			fl = append(fl, a)
			if !strings.Contains(a, "=") && takesValue(flags, a) && i+1 < len(args) {
				i++
				fl = append(fl, args[i])
			}
		case len(pos) == 0 && len(cmds) > 0:
			if sub := findCommand(cmds, a); sub != nil {
				return slices.Concat(fl, []string{a}, hoistLevel(args[i+1:], sub.Flags, sub.Subcommands, false))
			}
			if top {
				return slices.Concat(fl, args[i:])
			}
			pos = append(pos, a)
		default:
			pos = append(pos, a)
		}
	}
	return slices.Concat(fl, pos)
}

// takesValue reports whether the flag written as arg (-x or --name) is one
// of flags and reads the next argument as its value.
func takesValue(flags []cli.Flag, arg string) bool {
	name := strings.TrimLeft(arg, "-")
	for _, f := range flags {
		if slices.Contains(f.Names(), name) {
			v, ok := f.(interface{ TakesValue() bool })
			return ok && v.TakesValue()
		}
	}
	return false
}

func findCommand(cmds []*cli.Command, name string) *cli.Command {
	for _, c := range cmds {
		if c.HasName(name) {
			return c
		}
	}
	return nil
}
