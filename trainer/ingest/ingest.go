// Package ingest reads long-format input tables (one row per series, period and value) from CSV
// and Parquet and collects the rows of a shard into regular series.
//
// Errors come in two kinds. A file that cannot be read as a table at all (no header, a mapped
// column missing, a line too long, a corrupt Parquet footer) is broken input: the scan stops
// with an error wrapping ErrBrokenInput that names the object and the line or row group. A row
// that is readable but unusable (a value that is not a number, a date that does not parse) is a
// per-series problem: the scan hands it on with Row.Problem set, and the Collector rejects that
// one series with the reason while every other series carries on.
package ingest

import (
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"
)

// ErrBrokenInput marks a file that cannot be read as a table; the trainer maps it to the
// broken-input exit code.
var ErrBrokenInput = errors.New("broken input")

// ErrColumns marks an input whose header lacks a column the configuration maps
// (source.columns). Such an error also wraps ErrBrokenInput (the object cannot be read as the
// configured table), but the trainer exits with the configuration code (2): a mapping that
// does not match the header is almost always a wrong mapping, and no retry or carry-forward
// fixes it.
var ErrColumns = errors.New("the column mapping (source.columns) does not match the input")

// Row is one input row after column mapping.
type Row struct {
	// Key is the series key columns' cells encoded as one string (JoinKey, SplitKey).
	Key string
	// Date is the period the value belongs to, as written (its zone or offset kept).
	Date time.Time
	// Value is the observation.
	Value float64
	// Covariates holds the configured covariate columns in order; an empty cell is NaN.
	Covariates []float64
	// Problem, when non-empty, says why the row is unusable and where it is (object and line or
	// row); the Collector rejects the row's series with it.
	Problem string
	// EmptyValue marks a row whose only problem is an empty value cell; its covariates are
	// read. The Collector accepts such a row after the history's end, as a row of known
	// future covariates (see Collector.KeepFuture).
	EmptyValue bool
}

// emptyValue is parseValue's problem text for an empty cell.
const emptyValue = "empty value"

// GroupRange selects Parquet row groups [From, To).
type GroupRange struct{ From, To int }

// GroupInfo describes one Parquet row group, for the planner.
type GroupInfo struct {
	Rows int64
	// Bytes is the row group's compressed size in the file.
	Bytes int64
}

// brokenf returns an error wrapping ErrBrokenInput.
func brokenf(format string, a ...any) error {
	return fmt.Errorf("%s: %w", fmt.Sprintf(format, a...), ErrBrokenInput)
}

// parseValue parses an observation cell; the error text is the problem.
func parseValue(s string) (float64, string) {
	s = strings.TrimSpace(s)
	if s == "" {
		return 0, emptyValue
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		if ne, ok := err.(*strconv.NumError); ok && ne.Err == strconv.ErrRange {
			return 0, fmt.Sprintf("value %q is out of range", clip(s))
		}
		return 0, fmt.Sprintf("value %q is not a number", clip(s))
	}
	if v != v || v > maxFloat || v < -maxFloat {
		return 0, fmt.Sprintf("value %q is not finite", clip(s))
	}
	return v, ""
}

const maxFloat = 1.7976931348623157e308

// parseCovariate parses a covariate cell: empty is NaN (a missing covariate is allowed).
func parseCovariate(s string) (float64, string) {
	if strings.TrimSpace(s) == "" {
		return nan, ""
	}
	return parseValue(s)
}

// clip shortens a cell quoted in a message.
func clip(s string) string {
	const n = 40
	if len(s) <= n {
		return s
	}
	return s[:n] + "..."
}
