package pipeline

import (
	"context"
	"errors"
	"fmt"
	"io"
	"slices"
	"strings"

	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/tables"
)

// ParseSeries reads a series selector of the form item=X,depot=Y: one name=value field per key
// column of names, in any order, each exactly once, separated by commas. A value that holds a
// comma, or starts with a double quote, is written in double quotes with inner quotes doubled,
// as in CSV (item="A,1",depot=x; a quoted value may also hold line breaks); a value may hold
// '=' (the first one ends the name). It returns the series key (ingest.JoinKey of the values
// in key column order); errors are configuration errors naming the field.
func ParseSeries(names []string, sel string) (string, error) {
	fields, err := selectorFields(sel)
	if err != nil {
		return "", fmt.Errorf("--series %q: %v: %w", sel, err, ErrConfig)
	}
	cells := make([]string, len(names))
	set := make([]bool, len(names))
	for _, f := range fields {
		i := slices.Index(names, f[0])
		switch {
		case i < 0:
			return "", fmt.Errorf("--series: %q is not a key column of this run (%s): %w", f[0], strings.Join(names, ", "), ErrConfig)
		case set[i]:
			return "", fmt.Errorf("--series: %q given twice: %w", f[0], ErrConfig)
		}
		cells[i], set[i] = f[1], true
	}
	for i, ok := range set {
		if !ok {
			return "", fmt.Errorf("--series: no value for key column %q (the key columns are %s): %w", names[i], strings.Join(names, ", "), ErrConfig)
		}
	}
	return ingest.JoinKey(cells...), nil
}

// selectorFields splits a selector into its name=value fields (see ParseSeries).
func selectorFields(sel string) ([][2]string, error) {
	if sel == "" {
		return nil, errors.New("empty; want name=value fields such as item=X,depot=Y")
	}
	var out [][2]string
	rest := sel
	for {
		name, v, ok := strings.Cut(rest, "=")
		if !ok || name == "" || strings.ContainsAny(name, `,"`) {
			field, _, _ := strings.Cut(rest, ",")
			return nil, fmt.Errorf("field %q is not name=value", field)
		}
		var value string
		if strings.HasPrefix(v, `"`) {
			var b strings.Builder
			i := 1
			for {
				j := strings.IndexByte(v[i:], '"')
				if j < 0 {
					return nil, fmt.Errorf("field %q: the quoted value does not end", name)
				}
				b.WriteString(v[i : i+j])
				i += j + 1
				if i < len(v) && v[i] == '"' { // a doubled quote
					b.WriteByte('"')
					i++
					continue
				}
				break
			}
			value, rest = b.String(), v[i:]
			if rest != "" && rest[0] != ',' {
				return nil, fmt.Errorf("field %q: text after the quoted value", name)
			}
		} else {
			var found bool
			value, rest, found = strings.Cut(v, ",")
			if found {
				rest = "," + rest
			}
		}
		out = append(out, [2]string{name, value})
		if rest == "" {
			return out, nil
		}
		rest = rest[1:] // the comma
		if rest == "" {
			return nil, errors.New("ends with a comma")
		}
	}
}

// InspectSeries prints one series of a published run: where it is (unit, and the run that
// trained it), then its models row and its forecast rows as CSV with the tables' own columns,
// or its rejection reason. sel selects the series by its key columns (ParseSeries; the names
// are the run's source.columns.series from runs/<run>/config.json). In a hash-bucket run only
// the series' bucket is read; otherwise units are read until the series is found. A series the
// run does not hold is a configuration error (exit 2).
func InspectSeries(ctx context.Context, outputURI, run, sel string, w io.Writer) error {
	out, m, err := openPublished(ctx, outputURI, run)
	if err != nil {
		return err
	}
	defer out.Close()
	cfgKey := store.RunKey(m.Run, store.ConfigName)
	cb, err := out.Get(ctx, cfgKey)
	if err != nil {
		return storageErr(err)
	}
	cfg, err := runconfig.Parse(cb, out.Describe(cfgKey))
	if err != nil {
		return fmt.Errorf("%w: %w", ErrConfig, err)
	}
	names := cfg.Source.Columns.Series
	key, err := ParseSeries(names, sel)
	if err != nil {
		return err
	}
	units := m.Units
	if hashedLayout(m.Partitioning) && m.Buckets > 0 && cfg.Hierarchy == nil { // a hierarchy's aggregates may be in any unit
		e, ok := m.unit(BucketID(BucketOf(key, m.Buckets), m.Buckets))
		if !ok {
			return fmt.Errorf("series %s: run %s has no unit %s: %w", sel, m.Run, BucketID(BucketOf(key, m.Buckets), m.Buckets), ErrConfig)
		}
		units = []ManifestUnit{e}
	}
	var levels []float64
	for _, p := range cfg.QuantilePercents {
		levels = append(levels, float64(p)/100)
	}
	for _, u := range units {
		found, err := printSeries(ctx, out, names, levels, key, u, w)
		if err != nil || found {
			return err
		}
	}
	if len(units) == 1 && units[0].State == StateMissing {
		return fmt.Errorf("series %s: its unit %s is missing in run %s (%s): %w", sel, units[0].ID, m.Run, units[0].Reason, ErrConfig)
	}
	return fmt.Errorf("series %s is not in run %s: %w", sel, m.Run, ErrConfig)
}

// printSeries prints series key if unit u holds it, and reports whether it did.
func printSeries(ctx context.Context, out *store.Store, names []string, levels []float64, key string, u ManifestUnit, w io.Writer) (bool, error) {
	where := fmt.Sprintf("unit %s, trained by run %s", u.ID, u.Source)
	if u.State == StateCarried {
		where = fmt.Sprintf("unit %s, carried forward from run %s (%s)", u.ID, u.Source, u.Reason)
	}
	var model []tables.ModelRow
	if f, ok := u.file(TableModels); ok {
		err := readTable(ctx, out, f, func(r io.Reader) error {
			rows, err := tables.ReadModels(r, formatOf(f), names)
			for _, m := range rows {
				if m.Key == key {
					model = append(model, m)
				}
			}
			return err
		})
		if err != nil {
			return false, err
		}
	}
	if len(model) == 0 {
		f, ok := u.file(TableRejected)
		if !ok {
			return false, nil
		}
		var reasons []string
		err := readTable(ctx, out, f, func(r io.Reader) error {
			rows, err := tables.ReadRejected(r, formatOf(f), names)
			for _, rj := range rows {
				if rj.Key == key {
					reasons = append(reasons, rj.Reason)
				}
			}
			return err
		})
		if err != nil || len(reasons) == 0 {
			return false, err
		}
		fmt.Fprintf(w, "series %s: %s\nrejected, no forecast: %s\n", keyText(names, key), where, strings.Join(reasons, "; "))
		return true, nil
	}
	h := tables.Header{Keys: names, Quantiles: levels}
	var fc []tables.ForecastRow
	if f, ok := u.file(TableForecasts); ok {
		err := readTable(ctx, out, f, func(r io.Reader) error {
			hh, rows, err := tables.ReadForecasts(r, formatOf(f), names)
			h = hh
			for _, row := range rows {
				if row.Key == key {
					fc = append(fc, row)
				}
			}
			return err
		})
		if err != nil {
			return false, err
		}
	}
	fmt.Fprintf(w, "series %s: %s\n\nmodels:\n", keyText(names, key), where)
	if err := tables.WriteModels(w, tables.CSV, names, model); err != nil {
		return false, err
	}
	fmt.Fprintf(w, "\nforecasts:\n")
	return true, tables.WriteForecasts(w, tables.CSV, h, fc)
}

// formatOf is a table file's format, from its name.
func formatOf(f File) string { return strings.TrimPrefix(f.Key[strings.LastIndex(f.Key, "."):], ".") }

// keyText names a series by its key columns as ParseSeries reads them: item=A/1,depot=x, a
// value quoted when it holds a comma, a quote or a line break.
func keyText(names []string, key string) string {
	cells, err := ingest.SplitKey(key, len(names))
	if err != nil {
		return key
	}
	fields := make([]string, len(names))
	for i, c := range cells {
		if strings.ContainsAny(c, ",\"\n\r") {
			c = `"` + strings.ReplaceAll(c, `"`, `""`) + `"`
		}
		fields[i] = names[i] + "=" + c
	}
	return strings.Join(fields, ",")
}

// openPublished opens the output and reads the manifest of run, or of the run latest.json
// points at when run is ""; the caller closes out.
func openPublished(ctx context.Context, outputURI, run string) (*store.Store, *Manifest, error) {
	out, err := store.Open(ctx, outputURI)
	if err != nil {
		return nil, nil, storageErr(err)
	}
	m, err := publishedRun(ctx, out, run)
	if err != nil {
		out.Close()
		return nil, nil, err
	}
	return out, m, nil
}

// publishedRun reads the manifest of run, or of the run latest.json points at when run is "".
func publishedRun(ctx context.Context, out *store.Store, run string) (*Manifest, error) {
	if run == "" {
		p, ok, err := out.ReadLatest(ctx)
		if err != nil {
			return nil, storageErr(err)
		}
		if !ok {
			return nil, fmt.Errorf("%s: nothing published yet (no %s): %w", out, store.LatestKey, ErrConfig)
		}
		run = p.Run
	}
	if err := store.CheckName("run", run); err != nil {
		return nil, fmt.Errorf("--run: %w: %w", ErrConfig, err)
	}
	return readManifest(ctx, out, run)
}
