package report

import (
	_ "embed"
	"fmt"
	"html/template"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"

	"almanac.dev/almanac/trainer/backtest"
	calib "almanac.dev/almanac/trainer/coverage"
	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/selection"
	"almanac.dev/almanac/trainer/series"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/tables"
)

//go:embed page.html
var pageHTML string

var pageTmpl = template.Must(template.New("page").Funcs(template.FuncMap{
	"score": func(v float64) string {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return "–"
		}
		return fmt.Sprintf("%.2f", v)
	},
	"join": strings.Join,
}).Parse(pageHTML))

// page is everything the template shows.
type page struct {
	Run            *Run
	Overview       Overview
	Metric         string
	MetricSentence string
	// ChoiceLine and ChoiceIntro say how models were chosen (ChoiceSummary).
	ChoiceLine, ChoiceIntro string
	BandIntro               string
	ModelRows               []modelRow
	// FeatureUse lists, per feature-built member, the features it kept (see featureUse).
	FeatureUse               []FeatureUse
	Unit, Noun               string
	Horizon, Frequency       string
	Quantiles                []string
	Source                   string
	Scheduled, Trigger       string
	UnitsTrained, UnitsCarry int
	UnitsMissing             []string
	Complete                 bool
	HasManifest              bool
	DriftThreshold           string
	// FewPoints is the mean number of new periods per evaluated series when it is under 8.
	FewPoints              string
	HistoryProblem         string
	ModelsPlot, FamilyPlot string
	EvalPlot               string
	// Calibration of the previous forecast's quantiles on the new actuals (calibration.go).
	CalPlot     string
	CalRows     []calibrationRow
	CalSeries   int
	CalPoints   int
	CalBacktest int
	CalSkipped  int
	CalSegments []segmentRow
	// LevelBands is, by hierarchy level, how the widest band of the previous run's forecasts
	// held on the new actuals against its promise (bandHold; empty without hierarchy or
	// evaluated bands).
	LevelBands map[string]*segmentRow
	// Moved lists the series whose forecast moved most against the previous run's.
	Moved []movedRow
	Shown []shownSeries
	// KeyNames are the series key columns (source.columns.series); the rejected and index
	// tables give each its own column.
	KeyNames     []string
	Rejected     []rejectedRow
	RejectedMore int
	Index        []indexRow
	IndexMore    int
	IndexCap     int
}

// modelRow is one line of the chosen-models table.
type modelRow struct {
	Name, Family, Words string
	Count               int
	Share               string
}

// rejectedRow is one line of the rejected table: the key cells and the reason.
type rejectedRow struct {
	Cells  []string
	Reason string
}

// shownSeries is one series of the per-series section; Label names it by its key columns.
type shownSeries struct {
	Key, Label, Anchor, Plot, Title string
	Why                             []string
	Model, Params                   string
	Family, FamilyWords             string
	// Choice says how the model was chosen (ChoiceWords).
	Choice     string
	Score      float64
	ScoreWords string
	// Ratio is realized / expected error of the previous forecast ("" without evaluation).
	Ratio string
	Band  string
	Notes []string
	// Kept lists "member: feature, feature" for each feature-built member of its forecast.
	Kept      []string
	Carried   string
	Eval      *tables.EvaluationRow
	NoHistory bool
}

// indexRow is one line of the index of all series.
type indexRow struct {
	Cells                  []string
	Model, Anchor, Carried string
	Score                  float64
	Drifted                bool
}

// render writes the plots and index.html of r into dir, drawing the series in picks with
// their history hist, and returns the names of the files written. historyErr, when not nil,
// is shown as a warning.
func render(dir string, r *Run, picks []Pick, hist map[string]series.Series, historyErr error, o Options) (files []string, err error) {
	cfg := r.Config
	freq := series.Frequency(cfg.Source.Frequency)
	noun := periodNoun(freq)
	metric := backtest.Metric(cfg.Selection.Metric)
	if len(r.Models) > 0 && r.Models[0].Metric != "" {
		metric = backtest.Metric(r.Models[0].Metric)
	}
	unit := cfg.Source.Columns.Value
	var levels []float64
	for _, p := range cfg.QuantilePercents {
		levels = append(levels, float64(p)/100)
	}
	pg := page{
		Run: r, Overview: overview(r), Metric: string(metric), Unit: unit, Noun: noun,
		MetricSentence: MetricSentence(metric, unit, freq, freq.SeasonLength()),
		BandIntro:      BandSentence(levels, noun),
		Horizon:        plural(cfg.Horizon, noun) + " ahead",
		Frequency:      string(freq),
		Source:         store.Redact(cfg.Source.URI),
		Trigger:        cfg.Trigger,
		HasManifest:    r.Manifest != nil,
		UnitsMissing:   r.Missing,
		IndexCap:       o.IndexCap,
		FeatureUse:     featureUse(r.Models, noun),
	}
	for _, q := range levels {
		pg.Quantiles = append(pg.Quantiles, tables.QuantileColumn(q))
	}
	pg.ChoiceLine, pg.ChoiceIntro = ChoiceSummary(cfg.Selection.Design, string(metric))
	if !cfg.ScheduledTime.IsZero() {
		pg.Scheduled = cfg.ScheduledTime.UTC().Format("Mon 2 Jan 2006 15:04 MST")
	}
	if o := pg.Overview; o.Evaluated > 0 && o.EvaluatedPoints < 8*o.Evaluated {
		pg.FewPoints = strconv.FormatFloat(math.Round(10*float64(o.EvaluatedPoints)/float64(o.Evaluated))/10, 'f', -1, 64)
	}
	threshold := float64(cfg.Drift.ThresholdPercent) / 100
	if threshold > 0 {
		pg.DriftThreshold = trimFloat(threshold)
	}
	if m := r.Manifest; m != nil {
		pg.Complete = m.Complete
		pg.UnitsTrained, pg.UnitsCarry = m.Totals.Trained, m.Totals.CarriedForward
	}
	if historyErr != nil {
		pg.HistoryProblem = historyErr.Error()
	}

	for _, c := range pg.Overview.Models {
		f := familyOf(cfg.Models, c.Name)
		pg.ModelRows = append(pg.ModelRows, modelRow{Name: c.Name, Family: f, Words: ModelWords(c.Name, f), Count: c.Count,
			Share: fmt.Sprintf("%.0f%%", 100*float64(c.Count)/float64(pg.Overview.Trained))})
	}
	if len(pg.Overview.Models) > 0 {
		p, err := countBars("Chosen model per series", "number of series", pg.Overview.Models)
		if err != nil {
			return nil, err
		}
		pg.ModelsPlot = "chosen-models.svg"
		if files, err = svgTo(files, dir, pg.ModelsPlot, "Number of series by chosen model", p, plotWidth, barHeight(len(pg.Overview.Models))); err != nil {
			return nil, err
		}
		fp, err := familyBars(metric, pg.Overview.Families)
		if err != nil {
			return nil, err
		}
		pg.FamilyPlot = "accuracy-by-family.svg"
		if files, err = svgTo(files, dir, pg.FamilyPlot, "Median backtest "+string(metric)+" by chosen model family", fp, plotWidth, barHeight(len(pg.Overview.Families))+30); err != nil {
			return nil, err
		}
	}
	if len(r.Evaluation) > 0 {
		p, err := evaluationPlot(r.Evaluation[0].Metric, r.Evaluation, threshold)
		if err != nil {
			return nil, err
		}
		pg.EvalPlot = "previous-run-accuracy.svg"
		if files, err = svgTo(files, dir, pg.EvalPlot, "Expected versus realized error of the previous run's forecasts", p, plotWidth, vg.Points(440)); err != nil {
			return nil, err
		}
	}

	if c, skipped := calibrationSums(r.Evaluation); c.Points > 0 {
		ls := calib.Judge(c, reportFalseAlarm)
		p, err := calibrationPlot(ls)
		if err != nil {
			return nil, err
		}
		pg.CalPlot = "previous-run-calibration.svg"
		if files, err = svgTo(files, dir, pg.CalPlot, "Share of new actuals at or below each quantile of the previous run's forecasts", p, plotWidth, vg.Points(440)); err != nil {
			return nil, err
		}
		pg.CalRows = calibrationRows(c, ls)
		pg.CalSeries, pg.CalPoints, pg.CalBacktest, pg.CalSkipped = c.Series, c.Points, c.BacktestSeries, skipped
		segments := map[string]string{}
		for _, m := range r.Models {
			segments[m.Key] = m.Segment
		}
		pg.CalSegments = worstSegments(r.Evaluation, segments, 5)
		if len(r.Levels) > 0 {
			levels := map[string]string{}
			for _, m := range append(slices.Clip(r.Models), r.Nodes...) {
				levels[m.Key] = m.Level
			}
			pg.LevelBands = map[string]*segmentRow{}
			for _, b := range bandHold(append(slices.Clip(r.Evaluation), r.NodeEvaluation...), levels) {
				pg.LevelBands[b.Segment] = &b
			}
		}
	}

	models := map[string]tables.ModelRow{}
	for _, m := range r.Models {
		models[m.Key] = m
	}
	evals := map[string]*tables.EvaluationRow{}
	for i := range r.Evaluation {
		evals[r.Evaluation[i].Key] = &r.Evaluation[i]
	}
	anchors := map[string]string{}
	window := historyWindow(freq, cfg.Horizon)
	for i, pk := range picks {
		m := models[pk.Key]
		fc := r.Forecasts[pk.Key]
		s := shownSeries{Key: pk.Key, Label: keyLabel(cfg.Source.Columns.Series, pk.Key), Anchor: fmt.Sprintf("s%03d", i+1), Plot: fmt.Sprintf("series-%03d.svg", i+1), Why: pk.Why,
			Model: m.Model, Params: m.Params, Score: m.Score, ScoreWords: ScoreWords(metric, m.Score, unit, freq, freq.SeasonLength()),
			Band: BandShort(fc.Levels), Carried: r.Carried[pk.Key], Eval: evals[pk.Key]}
		s.Family = familyOf(cfg.Models, m.Model)
		s.FamilyWords = ModelWords(m.Model, s.Family)
		s.Choice = ChoiceWords(m.Design, m.Segment, string(metric), s.Family == selection.FamilyCombination)
		if e := s.Eval; e != nil && e.Expected > 0 && finite(e.Realized) {
			s.Ratio = fmt.Sprintf("%.1f", e.Realized/e.Expected)
		}
		if m.Notes != "" {
			s.Notes = strings.Split(m.Notes, "; ")
		}
		for _, member := range sortedKeys(m.Features) {
			s.Kept = append(s.Kept, member+": "+strings.Join(m.Features[member], ", "))
		}
		h, ok := hist[pk.Key]
		s.NoHistory = !ok
		var hp *series.Series
		if ok {
			hp = &h
		}
		s.Title = fmt.Sprintf("%s: %s, forecast %s", s.Label, m.Model, plural(len(fc.Rows), noun)+" ahead")
		p, err := seriesPlot(s.Title, fmt.Sprintf("%s per %s", unit, noun), hp, fc, window)
		if err != nil {
			return nil, fmt.Errorf("report: %s: %w", pk.Key, err)
		}
		if files, err = svgTo(files, dir, s.Plot, "Demand history and forecast of "+s.Label, p, plotWidth, vg.Points(360)); err != nil {
			return nil, err
		}
		anchors[pk.Key] = s.Anchor
		pg.Shown = append(pg.Shown, s)
	}

	pg.KeyNames = cfg.Source.Columns.Series
	pg.Moved = movedMost(r.Models, evals, pg.KeyNames, anchors, 10)
	for i, rj := range r.Rejected {
		if i == o.IndexCap {
			pg.RejectedMore = len(r.Rejected) - o.IndexCap
			break
		}
		pg.Rejected = append(pg.Rejected, rejectedRow{Cells: keyCells(pg.KeyNames, rj.Key), Reason: rj.Reason})
	}
	for i, m := range r.Models {
		if i == o.IndexCap {
			pg.IndexMore = len(r.Models) - o.IndexCap
			break
		}
		row := indexRow{Cells: keyCells(pg.KeyNames, m.Key), Model: m.Model, Score: m.Score, Anchor: anchors[m.Key], Carried: r.Carried[m.Key]}
		if e := evals[m.Key]; e != nil {
			row.Drifted = e.Drifted
		}
		pg.Index = append(pg.Index, row)
	}

	f, err := os.Create(filepath.Join(dir, "index.html"))
	if err != nil {
		return nil, err
	}
	if err := pageTmpl.Execute(f, pg); err != nil {
		f.Close()
		return nil, fmt.Errorf("report: index.html: %w", err)
	}
	return append(files, "index.html"), f.Close()
}

// svgTo writes the plot with writeSVG and appends its name to files.
func svgTo(files []string, dir, name, title string, p *plot.Plot, w, h vg.Length) ([]string, error) {
	return append(files, name), writeSVG(dir, name, title, p, w, h)
}

// plotWidth is the width of every plot (the page's content width at 96 dpi is 960 px).
const plotWidth = vg.Length(720)

// barHeight is the height of a horizontal bar chart with n bars.
func barHeight(n int) vg.Length { return vg.Length(70 + 22*max(n, 1)) }

// keyCells returns a series key's cells, one per key column (ingest.SplitKey); a key that does
// not split (not written by this release) is shown whole in the first column.
func keyCells(names []string, key string) []string {
	cells, err := ingest.SplitKey(key, len(names))
	if err != nil {
		cells = make([]string, len(names))
		cells[0] = key
	}
	return cells
}

// keyLabel names a series by its key columns: "item oat-flakes-1kg, depot harrow"; with one
// key column, the cell alone.
func keyLabel(names []string, key string) string {
	cells := keyCells(names, key)
	if len(cells) == 1 {
		return cells[0]
	}
	parts := make([]string, len(cells))
	for i, c := range cells {
		parts[i] = names[i] + " " + c
	}
	return strings.Join(parts, ", ")
}
