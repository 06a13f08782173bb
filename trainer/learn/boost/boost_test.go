package boost

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// column builds an n×1 matrix.
func column(x []float64) *mat.Dense { return mat.NewDense(len(x), 1, append([]float64(nil), x...)) }

// splits counts the split nodes of a model.
func splits(m *Model) int {
	n := 0
	for _, nd := range m.nodes {
		if nd.feature >= 0 {
			n++
		}
	}
	return n
}

// exact returns parameters for exact-arithmetic checks: no penalty, one-row leaves.
func exact(rounds int, rate float64, depth int) Params {
	p := DefaultParams()
	p.Rounds, p.LearningRate, p.MaxDepth, p.MinLeaf, p.L2, p.EarlyStop = rounds, rate, depth, 1, 0, 0
	return p
}

// stepData is x = 0.01, 0.02, ..., 1.00 with y = 1[x > 0.5].
func stepData() (x, y []float64) {
	for i := 1; i <= 100; i++ {
		v := float64(i) / 100
		x = append(x, v)
		if v > 0.5 {
			y = append(y, 1)
		} else {
			y = append(y, 0)
		}
	}
	return x, y
}

// TestStepOneSplit: one round at learning rate 1 learns y = 1[x>0.5] exactly with one split
// between the bins around 0.5, even when depth 3 would allow more (the leaves are pure, so no
// further split gains; the gain formula of Chen & Guestrin 2016, eq. 7).
func TestStepOneSplit(t *testing.T) {
	x, y := stepData()
	m, err := Fit(column(x), y, nil, nil, exact(1, 1, 3))
	if err != nil {
		t.Fatal(err)
	}
	if got := splits(m); got != 1 {
		t.Fatalf("splits = %d, want 1", got)
	}
	if cut := m.nodes[0].cut; !(cut > 0.50 && cut < 0.51) {
		t.Errorf("cut = %v, want in (0.50, 0.51)", cut)
	}
	for i := range x {
		if got := m.Predict([]float64{x[i]}); math.Abs(got-y[i]) > 1e-12 {
			t.Fatalf("F(%v) = %v, want %v", x[i], got, y[i])
		}
	}
}

// TestNoSplitOnRoundingNoise: once a tree fits the step exactly, the residuals left are
// rounding error (different on the two sides, since 0.1 + 0.7 and the fitted sums round
// differently); later trees must not split on them (common practice: a gain floor relative to
// the gradients' size).
func TestNoSplitOnRoundingNoise(t *testing.T) {
	x, y := stepData()
	for i := range y {
		y[i] = 0.1 + 0.7*y[i]
	}
	for _, loss := range []Loss{Squared, Absolute} {
		p := exact(5, 1, 1)
		p.Loss = loss
		m, err := Fit(column(x), y, nil, nil, p)
		if err != nil {
			t.Fatal(err)
		}
		if got := splits(m); got != 1 {
			t.Errorf("%v: %d splits in 5 rounds, want 1 (the first tree's)", loss, got)
		}
	}
}

// TestStepShrinkage: with shrinkage ν every least-squares round removes the fraction ν of the
// residual in each leaf (Friedman 2001, Algorithm 2, LS_Boost, with the tree of the previous
// test), so after k rounds |y - F| = 1/2 (1-ν)^k from F_0 = 1/2, approaching the leaf means as
// rounds grow. With λ > 0 one round's leaf is -G/(H+λ) (Chen & Guestrin 2016, eq. 5).
func TestStepShrinkage(t *testing.T) {
	x, y := stepData()
	for _, k := range []int{1, 10, 100} {
		m, err := Fit(column(x), y, nil, nil, exact(k, 0.1, 1))
		if err != nil {
			t.Fatal(err)
		}
		want := 0.5 * math.Pow(0.9, float64(k))
		for i := range x {
			if got := math.Abs(y[i] - m.Predict([]float64{x[i]})); math.Abs(got-want) > 1e-12 {
				t.Fatalf("k=%d: |y-F|(%v) = %v, want %v", k, x[i], got, want)
			}
		}
	}
	p := exact(1, 1, 1)
	p.L2 = 10
	m, err := Fit(column(x), y, nil, nil, p)
	if err != nil {
		t.Fatal(err)
	}
	// 50 rows on the right with residual 1/2: w = 25/(50+10).
	if got, want := m.Predict([]float64{0.9}), 0.5+25.0/60; math.Abs(got-want) > 1e-12 {
		t.Errorf("λ=10: F(0.9) = %v, want %v", got, want)
	}
}

// TestOneRoundIsRegressionTree: with learning rate 1, one round and λ = 0 the model is the
// least-squares regression tree (F_0 plus the tree of mean residuals is the tree of means), so
// it must match scikit-learn 1.2.1's DecisionTreeRegressor on the fixture in
// cart_fixture_test.go, with one and with two features (fewer distinct values than bins, so the
// cuts are exact).
func TestOneRoundIsRegressionTree(t *testing.T) {
	p := exact(1, 1, 3)
	p.MinLeaf = 3
	n := len(cartY)
	two := mat.NewDense(n, 2, nil)
	for i := range n {
		two.Set(i, 0, cartX1[i])
		two.Set(i, 1, cartX2[i])
	}
	for _, c := range []struct {
		name        string
		X           *mat.Dense
		train, grid []float64
		gridRow     func(k int) []float64
	}{
		{"one feature", column(cartX1), cartOneTrain, cartOneGrid, func(k int) []float64 { return []float64{cartGrid[k]} }},
		{"two features", two, cartTwoTrain, cartTwoGrid, func(k int) []float64 { return []float64{cartGrid[k], cartGrid[len(cartGrid)-1-k]} }},
	} {
		m, err := Fit(c.X, cartY, nil, nil, p)
		if err != nil {
			t.Fatal(err)
		}
		got := make([]float64, n)
		m.PredictInto(c.X, got)
		for i := range got {
			if math.Abs(got[i]-c.train[i]) > 1e-9 {
				t.Errorf("%s: row %d: F = %v, CART %v", c.name, i, got[i], c.train[i])
			}
		}
		for k := range cartGrid {
			if g := m.Predict(c.gridRow(k)); math.Abs(g-c.grid[k]) > 1e-9 {
				t.Errorf("%s: grid %d: F = %v, CART %v", c.name, k, g, c.grid[k])
			}
		}
	}
}

// TestConstantTarget: a constant target gives a constant model with no split (common
// practice: nothing to learn), whatever the features. 300 copies of 7.3 do not average to 7.3
// in floating point, so the gradients are tiny but not zero: the noise floor on the gain must
// keep the trees from splitting on rounding error.
func TestConstantTarget(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	X := mat.NewDense(300, 4, nil)
	y := make([]float64, 300)
	for i := range y {
		for j := range 4 {
			X.Set(i, j, rng.NormFloat64())
		}
		y[i] = 7.3
	}
	for _, loss := range []Loss{Squared, Absolute} {
		p := DefaultParams()
		p.Loss = loss
		p.Rounds = 50
		m, err := Fit(X, y, nil, nil, p)
		if err != nil {
			t.Fatal(err)
		}
		if s := splits(m); s != 0 {
			t.Errorf("%v: %d splits, want 0", loss, s)
		}
		for i := range y {
			if got := m.Predict(X.RawRowView(i)); math.Abs(got-7.3) > 1e-12 {
				t.Fatalf("%v: F(row %d) = %v, want 7.3", loss, i, got)
			}
		}
		for j, v := range m.Importance() {
			if v != 0 {
				t.Errorf("%v: importance[%d] = %v, want 0", loss, j, v)
			}
		}
	}
}

// TestStumpsAreAdditive: boosting depth-1 trees builds an additive model, one function per
// feature (Hastie, Tibshirani & Friedman, The Elements of Statistical Learning, 2nd ed.,
// section 10.11, from memory: trees with two leaves admit main effects only). On
// y = f1(x1) + f2(x2) + noise the model must be exactly additive and recover each centred
// component.
func TestStumpsAreAdditive(t *testing.T) {
	f1 := func(v float64) float64 { return math.Sin(2 * math.Pi * v) }
	f2 := func(v float64) float64 { return 4 * (v - 0.5) * (v - 0.5) }
	rng := rand.New(rand.NewPCG(3, 4))
	n := 3000
	X := mat.NewDense(n, 2, nil)
	y := make([]float64, n)
	for i := range n {
		a, b := rng.Float64(), rng.Float64()
		X.Set(i, 0, a)
		X.Set(i, 1, b)
		y[i] = f1(a) + f2(b) + 0.1*rng.NormFloat64()
	}
	p := DefaultParams()
	p.MaxDepth, p.Rounds, p.EarlyStop, p.MinLeaf = 1, 400, 0, 20
	m, err := Fit(X, y, nil, nil, p)
	if err != nil {
		t.Fatal(err)
	}
	grid := make([]float64, 41)
	for k := range grid {
		grid[k] = 0.0125 + 0.975*float64(k)/40
	}
	// Additivity: F(a, b) - F(a, b') does not depend on a.
	for _, b := range [][2]float64{{0.1, 0.8}, {0.35, 0.6}} {
		d0 := m.Predict([]float64{grid[0], b[0]}) - m.Predict([]float64{grid[0], b[1]})
		for _, a := range grid {
			d := m.Predict([]float64{a, b[0]}) - m.Predict([]float64{a, b[1]})
			if math.Abs(d-d0) > 1e-9 {
				t.Fatalf("not additive: F(%v,%v)-F(%v,%v) = %v, at a=%v it was %v", a, b[0], a, b[1], d, grid[0], d0)
			}
		}
	}
	// Components: the centred partial functions match the centred f1 and f2.
	for j, f := range []func(float64) float64{f1, f2} {
		g := make([]float64, len(grid))
		want := make([]float64, len(grid))
		for k, v := range grid {
			row := []float64{0.5, 0.5}
			row[j] = v
			g[k] = m.Predict(row)
			want[k] = f(v)
		}
		centre(g)
		centre(want)
		var se float64
		for k := range g {
			se += (g[k] - want[k]) * (g[k] - want[k])
		}
		if rmse := math.Sqrt(se / float64(len(g))); rmse > 0.08 {
			t.Errorf("component %d: RMSE against f%d = %.4f, want <= 0.08", j+1, j+1, rmse)
		}
	}
}

func centre(v []float64) {
	var s float64
	for _, x := range v {
		s += x
	}
	s /= float64(len(v))
	for i := range v {
		v[i] -= s
	}
}

// friedman1 draws n rows of the Friedman #1 benchmark (Friedman 1991, "Multivariate adaptive
// regression splines", Ann. Statist. 19(1), section 4.3) with cols >= 5 inputs: x uniform on
// [0,1]^cols, y = 10 sin(π x1 x2) + 20 (x3-1/2)² + 10 x4 + 5 x5 + ε, ε ~ N(0,1); x6... do not
// enter (the benchmark has 10 inputs).
func friedman1(rng *rand.Rand, n, cols int) (*mat.Dense, []float64) {
	X := mat.NewDense(n, cols, nil)
	y := make([]float64, n)
	for i := range n {
		r := X.RawRowView(i)
		for j := range r {
			r[j] = rng.Float64()
		}
		y[i] = 10*math.Sin(math.Pi*r[0]*r[1]) + 20*(r[2]-0.5)*(r[2]-0.5) + 10*r[3] + 5*r[4] + rng.NormFloat64()
	}
	return X, y
}

// rSquared is 1 - SSE/SST.
func rSquared(y, f []float64) float64 {
	var mean float64
	for _, v := range y {
		mean += v
	}
	mean /= float64(len(y))
	var sse, sst float64
	for i := range y {
		sse += (y[i] - f[i]) * (y[i] - f[i])
		sst += (y[i] - mean) * (y[i] - mean)
	}
	return 1 - sse/sst
}

// linearFit returns the test predictions of an ordinary least-squares fit with intercept.
func linearFit(X *mat.Dense, y []float64, test *mat.Dense) []float64 {
	n, c := X.Dims()
	A := mat.NewDense(n, c+1, nil)
	for i := range n {
		A.Set(i, 0, 1)
		for j := range c {
			A.Set(i, j+1, X.At(i, j))
		}
	}
	var beta mat.VecDense
	if err := beta.SolveVec(A, mat.NewVecDense(n, append([]float64(nil), y...))); err != nil {
		panic(err)
	}
	tn, _ := test.Dims()
	out := make([]float64, tn)
	for i := range tn {
		out[i] = beta.AtVec(0)
		for j := range c {
			out[i] += beta.AtVec(j+1) * test.At(i, j)
		}
	}
	return out
}

// TestFriedman1: on Friedman #1 the boosted trees must explain far more test variance than a
// linear fit (the interaction sin(π x1 x2) and the square in x3 are not linear; the noise-free
// share of variance is about 0.96, from memory: Var f ≈ 24 against noise variance 1), and give
// the five irrelevant inputs x6..x10 almost no importance.
func TestFriedman1(t *testing.T) {
	rng := rand.New(rand.NewPCG(1991, 1))
	X, y := friedman1(rng, 2000, 10)
	valX, valY := friedman1(rng, 500, 10)
	testX, testY := friedman1(rng, 2000, 10)
	p := DefaultParams()
	p.Rounds = 1000
	m, err := Fit(X, y, valX, valY, p)
	if err != nil {
		t.Fatal(err)
	}
	f := make([]float64, len(testY))
	m.PredictInto(testX, f)
	r2 := rSquared(testY, f)
	lin := rSquared(testY, linearFit(X, y, testX))
	t.Logf("test R²: boosted %.4f (%d rounds), linear %.4f", r2, m.Rounds(), lin)
	if r2 < 0.88 || r2 < lin+0.1 {
		t.Errorf("test R² = %.4f, linear %.4f: want >= 0.88 and at least 0.1 above linear", r2, lin)
	}
	if m.Rounds() >= p.Rounds {
		t.Errorf("kept %d rounds: early stopping never triggered", m.Rounds())
	}
	imp := m.Importance()
	var noise, sum float64
	for j, v := range imp {
		sum += v
		if j >= 5 {
			noise += v
		}
	}
	if math.Abs(sum-1) > 1e-12 {
		t.Errorf("importances sum to %v, want 1", sum)
	}
	if noise > 0.03 {
		t.Errorf("importance of x6..x10 = %.4f, want <= 0.03 (all: %.3f)", noise, imp)
	}
}

// TestEarlyStopKeepsBest builds a validation set whose loss is known round by round: on the
// step data with ν = 1/2 the fitted right-hand value is 1 - (1/2)^(k+1) after k rounds
// (TestStepShrinkage's recursion), so validation targets 0.875 / 0.125 have zero loss at round
// 2 and higher loss on either side; with EarlyStop = 3 the fit must stop after round 5 and keep
// 2 trees.
func TestEarlyStopKeepsBest(t *testing.T) {
	x, y := stepData()
	valY := make([]float64, len(y))
	for i := range y {
		valY[i] = 0.125 + 0.75*y[i]
	}
	p := exact(50, 0.5, 1)
	p.EarlyStop = 3
	m, err := Fit(column(x), y, column(x), valY, p)
	if err != nil {
		t.Fatal(err)
	}
	if m.Rounds() != 2 {
		t.Fatalf("kept %d rounds, want 2", m.Rounds())
	}
	if m.grown != 5 {
		t.Errorf("grew %d rounds, want 5 (best round 2 + 3 without improvement)", m.grown)
	}
	for i := range x {
		if got := m.Predict([]float64{x[i]}); math.Abs(got-valY[i]) > 1e-12 {
			t.Fatalf("F(%v) = %v, want %v", x[i], got, valY[i])
		}
	}
}

// TestEarlyStopOnNoise: on a target of pure noise deep trees only overfit, so the kept model
// must be the prefix of the full fit with the lowest validation loss, and shorter than it
// (common practice).
func TestEarlyStopOnNoise(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	draw := func(n int) (*mat.Dense, []float64) {
		X := mat.NewDense(n, 3, nil)
		y := make([]float64, n)
		for i := range n {
			for j := range 3 {
				X.Set(i, j, rng.Float64())
			}
			y[i] = rng.NormFloat64()
		}
		return X, y
	}
	X, y := draw(400)
	valX, valY := draw(400)
	p := DefaultParams()
	p.Rounds, p.MaxDepth, p.MinLeaf, p.LearningRate = 60, 6, 2, 0.3
	p.EarlyStop = 0
	full, err := Fit(X, y, valX, valY, p)
	if err != nil {
		t.Fatal(err)
	}
	p.EarlyStop = 5
	stopped, err := Fit(X, y, valX, valY, p)
	if err != nil {
		t.Fatal(err)
	}
	if full.Rounds() != 60 {
		t.Fatalf("EarlyStop 0 kept %d rounds, want all 60", full.Rounds())
	}
	// Validation loss of every prefix of the full fit.
	pred := make([]float64, len(valY))
	for i := range pred {
		pred[i] = full.base
	}
	losses := []float64{meanLoss(p, valY, pred)}
	for k := range full.roots {
		for i := range pred {
			pred[i] += walk(full.tree(k), valX.RawRowView(i)).value
		}
		losses = append(losses, meanLoss(p, valY, pred))
	}
	best := 0
	for k, l := range losses {
		if l < losses[best] {
			best = k
		}
	}
	if best+p.EarlyStop >= 60 {
		t.Fatalf("test data gives best round %d; noise should stop much earlier", best)
	}
	if stopped.Rounds() != best {
		t.Errorf("kept %d rounds, the best prefix has %d (losses %.4f)", stopped.Rounds(), best, losses)
	}
	for i := range 20 {
		row := valX.RawRowView(i)
		f := full.base
		for k := range best {
			f += walk(full.tree(k), row).value
		}
		if got := stopped.Predict(row); math.Abs(got-f) > 1e-12 {
			t.Fatalf("row %d: stopped model %v, prefix of the full one %v", i, got, f)
		}
	}
}

// TestMissingValues: NaN gets its own bin and each split learns where it goes (Chen & Guestrin
// 2016, Algorithm 3). Rows with x missing have y = 3, the rest y = 1[x > 0.5].
func TestMissingValues(t *testing.T) {
	x, y := stepData()
	for i := 0; i < len(x); i += 4 {
		x[i] = math.NaN()
		y[i] = 3
	}
	m, err := Fit(column(x), y, nil, nil, exact(1, 1, 2))
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct{ x, want float64 }{{math.NaN(), 3}, {0.2, 0}, {0.7, 1}} {
		if got := m.Predict([]float64{c.x}); math.Abs(got-c.want) > 1e-12 {
			t.Errorf("F(%v) = %v, want %v", c.x, got, c.want)
		}
	}
	// One stump must send missing values to the side whose target they share, left or right.
	for _, nanY := range []float64{0, 1} {
		yy := append([]float64(nil), y...)
		for i := 0; i < len(x); i += 4 {
			yy[i] = nanY
		}
		m, err := Fit(column(x), yy, nil, nil, exact(1, 1, 1))
		if err != nil {
			t.Fatal(err)
		}
		for _, c := range []struct{ x, want float64 }{{math.NaN(), nanY}, {0.2, 0}, {0.7, 1}} {
			if got := m.Predict([]float64{c.x}); math.Abs(got-c.want) > 1e-12 {
				t.Errorf("missing rows at %v: F(%v) = %v, want %v", nanY, c.x, got, c.want)
			}
		}
	}
	// MinLeaf counts the missing rows on their side: 5 low present rows and 20 missing ones
	// (y = 1) against 30 high rows (y = 0) split cleanly with MinLeaf 10, although the low
	// present rows alone are fewer than 10.
	var mx, my []float64
	for i := range 55 {
		switch {
		case i < 5:
			mx, my = append(mx, 0.1*float64(i+1)), append(my, 1)
		case i < 25:
			mx, my = append(mx, math.NaN()), append(my, 1)
		default:
			mx, my = append(mx, 0.6+0.01*float64(i)), append(my, 0)
		}
	}
	p := exact(1, 1, 1)
	p.MinLeaf = 10
	m, err = Fit(column(mx), my, nil, nil, p)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct{ x, want float64 }{{math.NaN(), 1}, {0.3, 1}, {0.8, 0}} {
		if got := m.Predict([]float64{c.x}); math.Abs(got-c.want) > 1e-12 {
			t.Errorf("MinLeaf 10 with missing rows: F(%v) = %v, want %v", c.x, got, c.want)
		}
	}
	// A feature missing exactly where the target is high, else constant: the split is
	// "present left, missing right".
	z := make([]float64, 40)
	w := make([]float64, 40)
	for i := range z {
		if i%2 == 0 {
			z[i], w[i] = math.NaN(), 10
		}
	}
	m, err = Fit(column(z), w, nil, nil, exact(1, 1, 1))
	if err != nil {
		t.Fatal(err)
	}
	if a, b := m.Predict([]float64{0}), m.Predict([]float64{math.NaN()}); math.Abs(a) > 1e-12 || math.Abs(b-10) > 1e-12 {
		t.Errorf("F(0) = %v, F(NaN) = %v, want 0 and 10", a, b)
	}
}

// TestQuantileLosses: y | x ~ Uniform(0, 2x) has τ-quantile 2τx (from the definition of a
// quantile; Koenker 2005, ch. 1, for the pinball loss it minimises). The pinball model at
// τ = 0.9 must follow 2·0.9·x and cover about 90% of fresh rows; the absolute-loss model must
// ignore 5% gross outliers that pull a squared-loss model away from the median x.
func TestQuantileLosses(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	n := 20000 // the leaf medians' sampling error stays well inside the tolerances
	draw := func() (*mat.Dense, []float64, []float64) {
		X := mat.NewDense(n, 1, nil)
		y := make([]float64, n)
		dirty := make([]float64, n)
		for i := range n {
			v := rng.Float64()
			X.Set(i, 0, v)
			y[i] = 2 * v * rng.Float64()
			dirty[i] = y[i]
			if rng.Float64() < 0.05 {
				dirty[i] += 50
			}
		}
		return X, y, dirty
	}
	X, y, dirty := draw()
	testX, testY, _ := draw()
	p := DefaultParams()
	p.Loss, p.Level, p.Rounds, p.MinLeaf, p.MaxDepth, p.EarlyStop = Pinball, 0.9, 300, 50, 2, 0
	m, err := Fit(X, y, nil, nil, p)
	if err != nil {
		t.Fatal(err)
	}
	for _, v := range []float64{0.2, 0.5, 0.8} {
		if got, want := m.Predict([]float64{v}), 1.8*v; math.Abs(got-want) > 0.1 {
			t.Errorf("pinball 0.9: F(%v) = %.3f, want %.3f ± 0.1", v, got, want)
		}
	}
	f := make([]float64, n)
	m.PredictInto(testX, f)
	below := 0
	for i := range f {
		if testY[i] <= f[i] {
			below++
		}
	}
	if cover := float64(below) / float64(n); math.Abs(cover-0.9) > 0.02 {
		t.Errorf("pinball 0.9 covers %.3f of fresh rows, want 0.90 ± 0.02", cover)
	}

	p.Loss = Absolute
	med, err := Fit(X, dirty, nil, nil, p)
	if err != nil {
		t.Fatal(err)
	}
	p.Loss = Squared
	mean, err := Fit(X, dirty, nil, nil, p)
	if err != nil {
		t.Fatal(err)
	}
	for _, v := range []float64{0.2, 0.5, 0.8} {
		// The median of Uniform(0, 2v) with 5% shifted far up is the 0.5/0.95 quantile of
		// Uniform(0, 2v): 2v·0.5263.
		want := 2 * v * 0.5 / 0.95
		if got := med.Predict([]float64{v}); math.Abs(got-want) > 0.1 {
			t.Errorf("absolute: F(%v) = %.3f, want %.3f ± 0.1", v, got, want)
		}
		// The squared-loss model follows the mean v + 0.05·50 (±1: the outlier share of a leaf
		// varies by about 0.35 at these leaf sizes).
		if got := mean.Predict([]float64{v}); math.Abs(got-(v+2.5)) > 1 {
			t.Errorf("squared: F(%v) = %.3f, want the mean %.2f ± 1", v, got, v+2.5)
		}
	}
}

// TestDeterministic: a fit depends only on its data and Params; row sampling follows Seed.
func TestDeterministic(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	X, y := friedman1(rng, 500, 10)
	p := DefaultParams()
	p.Rounds, p.EarlyStop, p.RowFraction, p.Seed = 40, 0, 0.5, 42
	fit := func(p Params) []float64 {
		m, err := Fit(X, y, nil, nil, p)
		if err != nil {
			t.Fatal(err)
		}
		out := make([]float64, 500)
		m.PredictInto(X, out)
		return out
	}
	a, b := fit(p), fit(p)
	p.Seed = 43
	c := fit(p)
	same, differ := true, false
	for i := range a {
		same = same && a[i] == b[i]
		differ = differ || a[i] != c[i]
	}
	if !same {
		t.Error("two fits with the same Seed differ")
	}
	if !differ {
		t.Error("fits with Seed 42 and 43 agree everywhere: sampling ignores the seed")
	}
}

// TestBadInput: every refusal names what is wrong.
func TestBadInput(t *testing.T) {
	x, y := stepData()
	X := column(x)
	inf := append([]float64(nil), x...)
	inf[7] = math.Inf(1)
	nanY := append([]float64(nil), y...)
	nanY[3] = math.NaN()
	infY := append([]float64(nil), y...)
	infY[9] = math.Inf(-1)
	with := func(f func(*Params)) Params { p := DefaultParams(); f(&p); return p }
	for name, c := range map[string]struct {
		X, valX *mat.Dense
		y, valY []float64
		p       Params
		want    string
	}{
		"short y":         {X: X, y: y[:99], p: DefaultParams(), want: "99 training targets for 100 training rows"},
		"NaN target":      {X: X, y: nanY, p: DefaultParams(), want: "training target at row 3 is NaN"},
		"Inf target":      {X: X, y: infY, p: DefaultParams(), want: "training target at row 9 is -Inf"},
		"no rows":         {X: &mat.Dense{}, y: nil, p: DefaultParams(), want: "no training rows"},
		"nil X":           {X: nil, y: nil, p: DefaultParams(), want: "no training rows"},
		"Inf feature":     {X: column(inf), y: y, p: DefaultParams(), want: "row 7, column 0 is +Inf"},
		"Bins 256":        {X: X, y: y, p: with(func(p *Params) { p.Bins = 256 }), want: "Params.Bins is 256"},
		"Bins 1":          {X: X, y: y, p: with(func(p *Params) { p.Bins = 1 }), want: "Params.Bins is 1"},
		"zero Params":     {X: X, y: y, p: Params{}, want: "Params.Rounds is 0"},
		"rate 0":          {X: X, y: y, p: with(func(p *Params) { p.LearningRate = 0 }), want: "Params.LearningRate is 0"},
		"depth 0":         {X: X, y: y, p: with(func(p *Params) { p.MaxDepth = 0 }), want: "Params.MaxDepth is 0"},
		"min leaf 0":      {X: X, y: y, p: with(func(p *Params) { p.MinLeaf = 0 }), want: "Params.MinLeaf is 0"},
		"negative L2":     {X: X, y: y, p: with(func(p *Params) { p.L2 = -1 }), want: "Params.L2 is -1"},
		"NaN L2":          {X: X, y: y, p: with(func(p *Params) { p.L2 = math.NaN() }), want: "Params.L2 is NaN"},
		"row fraction":    {X: X, y: y, p: with(func(p *Params) { p.RowFraction = 1.5 }), want: "Params.RowFraction is 1.5"},
		"pinball level":   {X: X, y: y, p: with(func(p *Params) { p.Loss = Pinball }), want: "Params.Level is 0"},
		"unknown loss":    {X: X, y: y, p: with(func(p *Params) { p.Loss = 9 }), want: "Params.Loss is Loss(9)"},
		"val columns":     {X: X, y: y, valX: mat.NewDense(2, 2, nil), valY: []float64{0, 0}, p: DefaultParams(), want: "validation rows have 2 columns, training rows 1"},
		"val length":      {X: X, y: y, valX: mat.NewDense(2, 1, nil), valY: []float64{0}, p: DefaultParams(), want: "1 validation targets for 2 validation rows"},
		"val NaN target":  {X: X, y: y, valX: mat.NewDense(2, 1, nil), valY: []float64{0, math.NaN()}, p: DefaultParams(), want: "validation target at row 1 is NaN"},
		"val Inf feature": {X: X, y: y, valX: mat.NewDense(1, 1, []float64{math.Inf(-1)}), valY: []float64{0}, p: DefaultParams(), want: "validation feature value at row 0, column 0 is -Inf"},
		"val y only":      {X: X, y: y, valY: []float64{0}, p: DefaultParams(), want: "validation targets given without validation rows"},
		"val empty":       {X: X, y: y, valX: &mat.Dense{}, p: DefaultParams(), want: "validation matrix has no rows"},
	} {
		_, err := Fit(c.X, c.y, c.valX, c.valY, c.p)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want one containing %q", name, err, c.want)
		}
	}
}

// TestPredictPanicsOnWrongWidth: a row of the wrong width is misuse.
func TestPredictPanicsOnWrongWidth(t *testing.T) {
	x, y := stepData()
	m, err := Fit(column(x), y, nil, nil, exact(1, 1, 1))
	if err != nil {
		t.Fatal(err)
	}
	defer func() {
		if r := recover(); r == nil || !strings.HasPrefix(r.(string), "boost: ") {
			t.Errorf("recover() = %v, want a boost: panic", r)
		}
	}()
	m.Predict([]float64{1, 2})
}

// TestQuantileCuts: equal-frequency cuts (Ke et al. 2017) halfway between neighbouring values.
func TestQuantileCuts(t *testing.T) {
	// Few distinct values: one bin each.
	if got := quantileCuts([]float64{3, 1, 2, 2, 1}, 10); len(got) != 2 || got[0] != 1.5 || got[1] != 2.5 {
		t.Errorf("cuts of {1,2,3} = %v, want [1.5 2.5]", got)
	}
	// 1000 distinct values into 10 bins of 100.
	vals := make([]float64, 1000)
	for i := range vals {
		vals[i] = float64(999 - i)
	}
	got := quantileCuts(vals, 10)
	if len(got) != 9 {
		t.Fatalf("%d cuts, want 9", len(got))
	}
	for k, c := range got {
		if want := float64(100*(k+1)) - 0.5; c != want {
			t.Errorf("cut %d = %v, want %v", k, c, want)
		}
	}
	// A value holding half the mass keeps a bin to itself; cuts stay strictly increasing and
	// at most bins-1.
	vals = vals[:0]
	for i := range 500 {
		vals = append(vals, 7, float64(i)/10)
	}
	got = quantileCuts(vals, 8)
	if len(got) > 7 {
		t.Fatalf("%d cuts for 8 bins", len(got))
	}
	for k := 1; k < len(got); k++ {
		if !(got[k] > got[k-1]) {
			t.Fatalf("cuts not increasing: %v", got)
		}
	}
	var below, above bool
	for _, c := range got {
		below = below || (c < 7 && c > 6.9)
		above = above || (c > 7 && c < 7.1)
	}
	if !below || !above {
		t.Errorf("cuts %v do not isolate the heavy value 7", got)
	}
	// Adjacent floats whose halves round up to the upper one: the cut falls back to the lower.
	a := math.Nextafter(1, 2)
	if c := between(a, math.Nextafter(a, 2)); c != a {
		t.Errorf("between adjacent floats = %v, want the lower one %v", c, a)
	}
}

// TestGainIsHalfSquaredErrorReduction: with h = 1 and λ = 0 a split's gain is half the drop in
// the squared error it brings (Chen & Guestrin 2016, eq. 7 against Breiman et al. 1984's
// least-squares criterion), so the gains of a one-round, learning-rate-1 tree add up to
// 1/2 (SST - SSE) of the scikit-learn 1.2.1 tree's fitted values on the CART fixture.
func TestGainIsHalfSquaredErrorReduction(t *testing.T) {
	p := exact(1, 1, 3)
	p.MinLeaf = 3
	m, err := Fit(column(cartX1), cartY, nil, nil, p)
	if err != nil {
		t.Fatal(err)
	}
	var mean float64
	for _, v := range cartY {
		mean += v
	}
	mean /= float64(len(cartY))
	var sst, sse, gains float64
	for i, v := range cartY {
		sst += (v - mean) * (v - mean)
		sse += (v - cartOneTrain[i]) * (v - cartOneTrain[i])
	}
	for _, nd := range m.nodes {
		if nd.feature >= 0 {
			gains += nd.gain
		}
	}
	if want := (sst - sse) / 2; math.Abs(gains-want) > 1e-9 {
		t.Errorf("sum of gains = %v, want 1/2 (SST - SSE) = %v", gains, want)
	}
}

// TestMinLeaf: a split leaves at least MinLeaf rows on each side (common practice). On the step
// data (100 rows, jump after row 50) MinLeaf 51 forbids every split, MinLeaf 50 allows the jump
// alone, and a jump after row 30 with MinLeaf 40 moves the cut to just after row 40.
func TestMinLeaf(t *testing.T) {
	x, y := stepData()
	for _, c := range []struct {
		minLeaf, jump int
		splits        int
		lo, hi        float64 // the root cut lies in (lo, hi)
	}{
		{51, 50, 0, 0, 0},
		{50, 50, 1, 0.50, 0.51},
		{40, 30, 1, 0.40, 0.41},
	} {
		for i := range y {
			y[i] = 0
			if i >= c.jump {
				y[i] = 1
			}
		}
		p := exact(1, 1, 1)
		p.MinLeaf = c.minLeaf
		m, err := Fit(column(x), y, nil, nil, p)
		if err != nil {
			t.Fatal(err)
		}
		if got := splits(m); got != c.splits {
			t.Errorf("MinLeaf %d: %d splits, want %d", c.minLeaf, got, c.splits)
			continue
		}
		if c.splits > 0 {
			if cut := m.nodes[0].cut; !(cut > c.lo && cut < c.hi) {
				t.Errorf("MinLeaf %d: cut %v, want in (%v, %v)", c.minLeaf, cut, c.lo, c.hi)
			}
		}
	}
}

// TestAbsoluteLeafIsMedian: for the absolute loss the tree is grown on gradient signs and each
// leaf is refitted to the median of its residuals (Friedman 2001, Algorithm 3, LAD_TreeBoost), so
// one round at learning rate 1 predicts each side's sample median exactly. Left of 0.5 the
// targets are 0..4 ten times each, right 10..14: with the order-statistic median u_(ceil(n/2))
// (Koenker 2005) the sides get 2 and 12, from F_0 = 4 (the median of all 100).
func TestAbsoluteLeafIsMedian(t *testing.T) {
	x, _ := stepData()
	y := make([]float64, len(x))
	for i := range y {
		y[i] = float64(i % 5)
		if x[i] > 0.5 {
			y[i] += 10
		}
	}
	p := exact(1, 1, 1)
	p.Loss = Absolute
	m, err := Fit(column(x), y, nil, nil, p)
	if err != nil {
		t.Fatal(err)
	}
	if m.Base() != 4 {
		t.Errorf("F_0 = %v, want 4", m.Base())
	}
	if a, b := m.Predict([]float64{0.3}), m.Predict([]float64{0.7}); a != 2 || b != 12 {
		t.Errorf("F(0.3), F(0.7) = %v, %v, want 2 and 12", a, b)
	}
}

// TestRawAndBinnedAgree: a row reaches the same leaf whether it is routed by its bin codes (as
// in training) or by its raw values against the cuts (as in prediction), with more distinct
// values than bins and with missing values (common practice: the cut of bin b is its upper
// edge, so x <= cut exactly when code(x) <= b).
func TestRawAndBinnedAgree(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 14))
	X, y := friedman1(rng, 1500, 10)
	for i := 0; i < 1500; i += 7 {
		X.Set(i, i%10, math.NaN())
	}
	p := DefaultParams()
	p.Rounds, p.EarlyStop, p.Bins, p.MaxDepth = 30, 0, 32, 5
	m, err := Fit(X, y, nil, nil, p)
	if err != nil {
		t.Fatal(err)
	}
	data, err := binFeatures(X, p.Bins)
	if err != nil {
		t.Fatal(err)
	}
	for k := range m.roots {
		tr := m.tree(k)
		for i := range 1500 {
			raw := walk(tr, X.RawRowView(i))
			coded := walkCodes(tr, data.codes[i*10:(i+1)*10], data)
			if raw != coded {
				t.Fatalf("tree %d, row %d: raw values reach leaf %v, codes reach %v", k, i, *raw, *coded)
			}
		}
	}
}
