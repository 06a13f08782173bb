package boost

import "math"

// node is one node of a tree. A leaf has feature < 0 and carries value; a split sends a row
// left when its value is <= cut (training rows: when its code is <= bin), and a missing value
// left when missingLeft is set.
type node struct {
	feature     int32
	left, right int32
	bin         uint8
	missingLeft bool
	cut         float64
	value       float64 // leaf output, shrinkage included
	gain        float64 // split gain, for Importance
}

// bucket is one histogram cell: sums of gradients, Hessians and the row count.
type bucket struct {
	g, h float64
	n    int32
}

// split is the best split found for a node.
type split struct {
	gain           float64
	feature        int
	bin            int
	missingLeft    bool
	gl, hl, gr, hr float64
	nl, nr         int
}

// leafRange records the rows of one leaf: idx[start:end] of the grower.
type leafRange struct {
	node       int32
	start, end int
}

// grower grows one tree per round over the binned training rows. Its buffers live across rounds,
// so that growing a tree allocates only when a deeper tree needs more histograms than before.
type grower struct {
	p       Params
	data    *binned
	g, h    []float64
	idx     []int32 // rows of the current tree, partitioned node by node
	scratch []int32
	free    [][]bucket // spare histograms
	nodes   []node     // nodes of the tree being grown
	leaves  []leafRange
	floor   float64 // gains at or below this are rounding noise (see gainFloor)
}

func newGrower(p Params, data *binned, floor float64) *grower {
	return &grower{
		p:       p,
		floor:   floor,
		data:    data,
		g:       make([]float64, data.rows),
		h:       make([]float64, data.rows),
		idx:     make([]int32, data.rows),
		scratch: make([]int32, data.rows),
	}
}

func (gr *grower) histogram() []bucket {
	if k := len(gr.free); k > 0 {
		hist := gr.free[k-1]
		gr.free = gr.free[:k-1]
		clear(hist)
		return hist
	}
	return make([]bucket, gr.data.offset[gr.data.cols])
}

func (gr *grower) release(hist []bucket) {
	if hist != nil {
		gr.free = append(gr.free, hist)
	}
}

// fill adds the rows' gradients into hist.
func (gr *grower) fill(hist []bucket, rows []int32) {
	cols := gr.data.cols
	offset := gr.data.offset[:cols]
	for _, r := range rows {
		gi, hi := gr.g[r], gr.h[r]
		codes := gr.data.codes[int(r)*cols : int(r)*cols+cols]
		for f, c := range codes {
			e := &hist[offset[f]+int(c)]
			e.g += gi
			e.h += hi
			e.n++
		}
	}
}

// grow grows a tree on the rows idx[:m] and returns its nodes (owned by the grower until the
// next call) and the leaves' row ranges. Leaf values are -G/(H+λ) without shrinkage.
func (gr *grower) grow(m int) ([]node, []leafRange) {
	gr.nodes = gr.nodes[:0]
	gr.leaves = gr.leaves[:0]
	rows := gr.idx[:m]
	var G, H float64
	for _, r := range rows {
		G += gr.g[r]
		H += gr.h[r]
	}
	var hist []bucket
	if gr.splittable(m, 0) {
		hist = gr.histogram()
		gr.fill(hist, rows)
	}
	gr.nodes = append(gr.nodes, node{})
	gr.growNode(0, 0, m, 0, G, H, hist)
	return gr.nodes, gr.leaves
}

// splittable reports whether a node of n rows at depth d may still split.
func (gr *grower) splittable(n, depth int) bool {
	return depth < gr.p.MaxDepth && n >= 2*gr.p.MinLeaf
}

// growNode decides node id covering idx[start:end] with gradient sums G, H and histogram hist
// (nil when the node cannot split). It takes ownership of hist.
func (gr *grower) growNode(id int32, start, end, depth int, G, H float64, hist []bucket) {
	var s split
	found := false
	if hist != nil {
		s, found = gr.best(hist, end-start, G, H)
	}
	if !found {
		gr.release(hist)
		gr.nodes[id] = node{feature: -1, left: -1, right: -1, value: -G / (H + gr.p.L2)}
		gr.leaves = append(gr.leaves, leafRange{node: id, start: start, end: end})
		return
	}
	mid := gr.partition(start, end, s)
	cut := math.Inf(1)
	if cuts := gr.data.cuts[s.feature]; s.bin < len(cuts) {
		cut = cuts[s.bin]
	}
	left, right := int32(len(gr.nodes)), int32(len(gr.nodes)+1)
	gr.nodes[id] = node{feature: int32(s.feature), left: left, right: right, bin: uint8(s.bin),
		missingLeft: s.missingLeft, cut: cut, gain: s.gain}
	gr.nodes = append(gr.nodes, node{}, node{})

	// Histogram subtraction: count the smaller child, the larger one is parent minus smaller.
	needL, needR := gr.splittable(s.nl, depth+1), gr.splittable(s.nr, depth+1)
	var histL, histR []bucket
	if needL || needR {
		small, smallStart, smallEnd := &histL, start, mid
		large := &histR
		if s.nl > s.nr {
			small, smallStart, smallEnd, large = &histR, mid, end, &histL
		}
		*small = gr.histogram()
		gr.fill(*small, gr.idx[smallStart:smallEnd])
		for k, e := range *small {
			p := &hist[k]
			p.g -= e.g
			p.h -= e.h
			p.n -= e.n
		}
		*large = hist
		hist = nil
		if !needL {
			gr.release(histL)
			histL = nil
		}
		if !needR {
			gr.release(histR)
			histR = nil
		}
	}
	gr.release(hist)
	gr.growNode(left, start, mid, depth+1, s.gl, s.hl, histL)
	gr.growNode(right, mid, end, depth+1, s.gr, s.hr, histR)
}

// best scans every feature's histogram for the split of largest gain
//
//	gain = 1/2 [ G_L²/(H_L+λ) + G_R²/(H_R+λ) - G²/(H+λ) ]    (Chen & Guestrin 2016, eq. 7)
//
// trying missing values on either side (their Algorithm 3). The candidate after bin b sends
// bins <= b left; bins the node has no rows in are skipped, so among cuts giving the same
// children the lowest is kept. Ties go to the lower feature, then the lower bin, then missing
// values on the right. Both children need MinLeaf rows.
func (gr *grower) best(hist []bucket, rows int, G, H float64) (split, bool) {
	n := int32(rows)
	lambda := gr.p.L2
	minLeaf := int32(gr.p.MinLeaf)
	parent := G * G / (H + lambda)
	best := gr.floor
	var s split
	found := false
	for f := 0; f < gr.data.cols; f++ {
		hf := hist[gr.data.offset[f]:gr.data.offset[f+1]]
		real, miss := hf[:len(hf)-1], hf[len(hf)-1]
		var gl, hl float64
		var nl int32
		for b, e := range real {
			if e.n == 0 {
				continue
			}
			gl += e.g
			hl += e.h
			nl += e.n
			if n-nl < minLeaf {
				break // every later candidate leaves fewer than MinLeaf rows on the right
			}
			// Missing values right (with the present values above the cut).
			if nl >= minLeaf {
				rg, rh := G-gl, H-hl
				if gain := (gl*gl/(hl+lambda) + rg*rg/(rh+lambda) - parent) / 2; gain > best {
					best = gain
					s = split{gain: gain, feature: f, bin: b,
						gl: gl, hl: hl, gr: rg, hr: rh, nl: int(nl), nr: int(n - nl)}
					found = true
				}
			}
			if miss.n == 0 || nl+miss.n < minLeaf || n-nl-miss.n < minLeaf {
				continue
			}
			// Missing values left.
			lg, lh := gl+miss.g, hl+miss.h
			rg, rh := G-lg, H-lh
			if gain := (lg*lg/(lh+lambda) + rg*rg/(rh+lambda) - parent) / 2; gain > best {
				best = gain
				s = split{gain: gain, feature: f, bin: b, missingLeft: true,
					gl: lg, hl: lh, gr: rg, hr: rh, nl: int(nl + miss.n), nr: int(n - nl - miss.n)}
				found = true
			}
		}
	}
	return s, found
}

// partition reorders idx[start:end] so that rows going left come first, keeping the row order
// on each side, and returns the first index of the right side.
func (gr *grower) partition(start, end int, s split) int {
	cols := gr.data.cols
	missing := gr.data.missing(s.feature)
	bin := uint8(s.bin)
	l, r := start, 0
	for _, row := range gr.idx[start:end] {
		c := gr.data.codes[int(row)*cols+s.feature]
		goLeft := c <= bin
		if c == missing {
			goLeft = s.missingLeft
		}
		if goLeft {
			gr.idx[l] = row
			l++
		} else {
			gr.scratch[r] = row
			r++
		}
	}
	copy(gr.idx[l:end], gr.scratch[:r])
	return l
}

// walkCodes returns the leaf of the tree nodes reached by a binned row. The missing code is
// above every split bin, so code <= bin means a present value on the left.
func walkCodes(nodes []node, codes []uint8, data *binned) *node {
	k := int32(0)
	for nodes[k].feature >= 0 {
		nd := &nodes[k]
		c := codes[nd.feature]
		if c <= nd.bin || (nd.missingLeft && c == data.missing(int(nd.feature))) {
			k = nd.left
		} else {
			k = nd.right
		}
	}
	return &nodes[k]
}

// walk returns the leaf of the tree nodes reached by a row of raw feature values (NaN fails
// v <= cut, so it goes left only when missingLeft says so).
func walk(nodes []node, row []float64) *node {
	k := int32(0)
	for nodes[k].feature >= 0 {
		nd := &nodes[k]
		if v := row[nd.feature]; v <= nd.cut || (nd.missingLeft && math.IsNaN(v)) {
			k = nd.left
		} else {
			k = nd.right
		}
	}
	return &nodes[k]
}
