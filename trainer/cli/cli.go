// Package cli holds the command-line rules every almanac-trainer subcommand follows: -h and
// --help print the usage to stdout and exit 0; a flag that does not parse, or an argument the
// subcommand does not take, prints the error naming it and the usage to stderr and exits 2
// (exitcode.Config); list flags are comma-separated and an empty item is an error naming the
// flag, not a silently shorter list.
package cli

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"strconv"
	"strings"

	"almanac.dev/almanac/trainer/exitcode"
)

// Parse parses args into fs. usage is the subcommand's usage line(s), printed above the flags.
// It returns ok false with the exit code when the command should stop here: 0 after -h, 2
// after a bad flag or a stray argument.
func Parse(fs *flag.FlagSet, usage string, args []string, stdout, stderr io.Writer) (code int, ok bool) {
	print := func(w io.Writer) {
		fmt.Fprintln(w, strings.TrimRight(usage, "\n"))
		fs.SetOutput(w)
		fs.PrintDefaults()
		fs.SetOutput(stderr)
	}
	fs.SetOutput(stderr)
	fs.Usage = func() {} // printed below: to stdout for -h, to stderr after an error
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			print(stdout)
			return exitcode.OK, false
		}
		// The flag package has printed the error, which names the flag.
		print(stderr)
		return exitcode.Config, false
	}
	if fs.NArg() > 0 {
		fmt.Fprintf(stderr, "almanac-trainer %s: unexpected argument %q (every setting is a flag; see -h)\n", fs.Name(), fs.Arg(0))
		return exitcode.Config, false
	}
	return exitcode.OK, true
}

// List splits a comma-separated flag value into its items, trimmed of spaces. An empty value
// is an empty list; an empty item ("ETS,,Theta", "ETS, ") is an error naming the flag.
func List(flagName, value string) ([]string, error) {
	if strings.TrimSpace(value) == "" {
		return nil, nil
	}
	var out []string
	for i, p := range strings.Split(value, ",") {
		p = strings.TrimSpace(p)
		if p == "" {
			return nil, fmt.Errorf("--%s: item %d of %q is empty", flagName, i+1, value)
		}
		out = append(out, p)
	}
	return out, nil
}

// Ints is List for integer items.
func Ints(flagName, value string) ([]int, error) {
	items, err := List(flagName, value)
	if err != nil {
		return nil, err
	}
	var out []int
	for _, s := range items {
		v, err := strconv.Atoi(s)
		if err != nil {
			return nil, fmt.Errorf("--%s: %q is not an integer", flagName, s)
		}
		out = append(out, v)
	}
	return out, nil
}

// Set reports the flags given on the command line, by name.
func Set(fs *flag.FlagSet) map[string]bool {
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	return set
}
