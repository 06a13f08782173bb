package main

import (
	"errors"
	"flag"
	"fmt"
	"io"

	"almanac.dev/almanac/api/offline"
	"almanac.dev/almanac/trainer/exitcode"
	"almanac.dev/almanac/trainer/pipeline"
)

// fileList is a repeatable -f flag.
type fileList []string

func (f *fileList) String() string     { return fmt.Sprint(*f) }
func (f *fileList) Set(s string) error { *f = append(*f, s); return nil }

// validate checks ForecastPortfolio and ForecastRun manifests offline with the CRDs' schema,
// defaults and CEL rules (api/offline), then each portfolio's rendered run configuration with
// the trainer's own check (pipeline.Check, as plan runs it): exit 0 when every object of every
// file is valid, 2 with every refused field's path otherwise.
func validate(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("validate", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var files fileList
	fs.Var(&files, "f", "manifest `file` (YAML or JSON, several documents allowed; - reads stdin); repeatable")
	usage := func(w io.Writer) {
		fmt.Fprintln(w, "usage: almanac-trainer validate -f FILE [-f FILE...]\n"+
			"Checks ForecastPortfolio and ForecastRun manifests as the apiserver would on create (strict\n"+
			"fields, CRD defaults, schema and CEL rules): exit 0 when all are valid, 2 naming every bad field.")
		fs.SetOutput(w)
		fs.PrintDefaults()
	}
	fs.Usage = func() {} // printed below, to stdout for -h
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			usage(stdout)
			return exitcode.OK
		}
		usage(stderr)
		return exitcode.Config
	}
	if fs.NArg() > 0 {
		fmt.Fprintf(stderr, "almanac-trainer validate: unexpected argument %q (files are given with -f)\n", fs.Arg(0))
		return exitcode.Config
	}
	if len(files) == 0 {
		fmt.Fprintln(stderr, "almanac-trainer validate: -f FILE is required")
		return exitcode.Config
	}
	code := exitcode.OK
	for _, f := range files {
		var objs []offline.Object
		var err error
		if f == "-" {
			var data []byte
			if data, err = io.ReadAll(stdin); err == nil {
				objs, err = offline.Load("<stdin>", data)
			}
		} else {
			objs, err = offline.LoadFile(f)
		}
		for _, o := range objs {
			name := f
			if f == "-" {
				name = "<stdin>"
			}
			// The schema and CEL rules passed; the trainer's own rules (pipeline.Check: each
			// member through the model registry, features, metrics) run on the run
			// configuration the controller would render, as plan would run them.
			if o.Portfolio != nil {
				c, rerr := renderManual(o.Portfolio, "validate", "")
				if rerr == nil {
					_, rerr = pipeline.Check(&c)
				}
				if rerr != nil {
					fmt.Fprintf(stderr, "%s:%d: %s %q: the trainer refuses it: %v\n", name, o.Line, o.Kind(), o.Name(), rerr)
					code = exitcode.Config
					continue
				}
			}
			fmt.Fprintf(stdout, "%s: %s %s valid\n", name, o.Kind(), o.Name())
		}
		if err != nil {
			fmt.Fprintln(stderr, err)
			code = exitcode.Config
		}
	}
	return code
}
