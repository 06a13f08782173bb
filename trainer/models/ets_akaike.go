package models

import (
	"fmt"
	"math"
	"strings"
)

// etsAkaikeFit is the ETS zoo member's forecast: the Akaike-weighted mean of the forms
// SelectETS refined (Kolassa 2011, "Combining exponential smoothing forecasts using Akaike
// weights", IJF 27(2); Burnham & Anderson 2002, "Model Selection and Multimodel Inference",
// section 2.9). With Δ_i = AICc_i − min_j AICc_j,
//
//	w_i = exp(−Δ_i / 2) / Σ_j exp(−Δ_j / 2),
//
// the mean, every quantile level (step by step: the quantile average, Lichtendahl,
// Grushka-Cockayne & Winkler 2013, Management Science 59(7)) and the fitted values are the
// w-weighted means of the forms'. Kolassa weighs every form; SelectETS refines only its
// etsRefined best-screened forms (the others' AICc are screening upper bounds), so the weights
// run over those: refining all forms costs about 6x the CPU (PROJECT-NOTES.md, seventh session).
type etsAkaikeFit struct {
	fits    []*ETSFit // best AICc first
	weights []float64
}

// AkaikeWeighted returns the Akaike-weighted mean of the forms SelectETS refined to give fit
// (see etsAkaikeFit), or fit itself when it is the only one (or was not made by SelectETS).
func AkaikeWeighted(fit *ETSFit) Fitted {
	if len(fit.refined) < 2 {
		return fit
	}
	return newETSAkaike(fit.refined)
}

func newETSAkaike(fits []*ETSFit) *etsAkaikeFit {
	aicc := make([]float64, len(fits))
	for i, f := range fits {
		aicc[i] = f.AICc()
	}
	return &etsAkaikeFit{fits: fits, weights: akaikeWeights(aicc)}
}

// akaikeWeights returns w_i = exp(−Δ_i/2) / Σ_j exp(−Δ_j/2), Δ_i = aicc_i − min_j aicc_j
// (finite criteria).
func akaikeWeights(aicc []float64) []float64 {
	best := math.Inf(1)
	for _, v := range aicc {
		best = math.Min(best, v)
	}
	w := make([]float64, len(aicc))
	total := 0.0
	for i, v := range aicc {
		w[i] = math.Exp(-(v - best) / 2)
		total += w[i]
	}
	for i := range w {
		w[i] /= total
	}
	return w
}

// Name lists the forms, best first, e.g. "ETS(A,Ad,N)+ETS(A,A,N)".
func (a *etsAkaikeFit) Name() string {
	names := make([]string, len(a.fits))
	for i, f := range a.fits {
		names[i] = f.Name()
	}
	return strings.Join(names, "+")
}

// Params returns the best form's parameters and each form's weight as "weight<i>" (i = 1 for
// the best form, in Name's order).
func (a *etsAkaikeFit) Params() map[string]float64 {
	p := a.fits[0].Params()
	for i, w := range a.weights {
		p[fmt.Sprintf("weight%d", i+1)] = w
	}
	return p
}

// Forecast is the weighted mean of the forms' forecasts, level by level for quantiles.
func (a *etsAkaikeFit) Forecast(h int, levels []float64) Forecast {
	out := Forecast{Mean: make([]float64, h), Levels: append([]float64(nil), levels...)}
	if len(levels) > 0 {
		out.Quantiles = make([][]float64, len(levels))
		for j := range out.Quantiles {
			out.Quantiles[j] = make([]float64, h)
		}
	}
	for i, f := range a.fits {
		fc := f.Forecast(h, levels)
		w := a.weights[i]
		for k := range out.Mean {
			out.Mean[k] += w * fc.Mean[k]
		}
		for j := range out.Quantiles {
			for k := range out.Quantiles[j] {
				out.Quantiles[j][k] += w * fc.Quantiles[j][k]
			}
		}
	}
	return out
}

// InSample is the weighted mean of the forms' one-step fitted values.
func (a *etsAkaikeFit) InSample() []float64 {
	var out []float64
	for i, f := range a.fits {
		in := f.InSample()
		if out == nil {
			out = make([]float64, len(in))
		}
		for t := range out {
			out[t] += a.weights[i] * in[t]
		}
	}
	return out
}

// Update carries every form forward to y with its estimates fixed (ETSFit.Update) and keeps
// the weights (they are estimates too; backtest.Updater).
func (a *etsAkaikeFit) Update(y []float64) (Fitted, error) {
	out := &etsAkaikeFit{fits: make([]*ETSFit, len(a.fits)), weights: append([]float64(nil), a.weights...)}
	for i, f := range a.fits {
		g, err := f.Update(y)
		if err != nil {
			return nil, err
		}
		out.fits[i] = g.(*ETSFit)
	}
	return out, nil
}
