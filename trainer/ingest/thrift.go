package ingest

import "fmt"

// checkThrift walks a Thrift compact-protocol struct (the Parquet footer's encoding) without
// decoding it and reports whether every declared length fits in the bytes that remain. The
// Parquet library allocates lists and strings at their declared size before reading them, so a
// corrupt footer could otherwise make it allocate gigabytes; this check turns that into a clear
// error. Encoding reference: Apache Thrift, "Thrift Compact protocol encoding" (thrift/doc/
// specs/thrift-compact-protocol.md).
func checkThrift(b []byte) error {
	w := thriftWalker{b: b}
	if err := w.structure(0); err != nil {
		return fmt.Errorf("corrupt footer at byte %d: %v", w.i, err)
	}
	return nil
}

type thriftWalker struct {
	b []byte
	i int
	// onInt, when set, sees every integer field of the outermost struct (depth 0) and of the
	// structs directly inside it (depth 1), with its field id and value.
	onInt func(depth, field int, v int64)
}

const maxThriftDepth = 64

func (w *thriftWalker) left() int { return len(w.b) - w.i }

func (w *thriftWalker) byte() (byte, error) {
	if w.i >= len(w.b) {
		return 0, fmt.Errorf("unexpected end")
	}
	c := w.b[w.i]
	w.i++
	return c, nil
}

func (w *thriftWalker) varint() (uint64, error) {
	var x uint64
	for shift := 0; shift < 64; shift += 7 {
		c, err := w.byte()
		if err != nil {
			return 0, err
		}
		x |= uint64(c&0x7f) << shift
		if c < 0x80 {
			return x, nil
		}
	}
	return 0, fmt.Errorf("varint longer than 10 bytes")
}

func unzigzag(u uint64) int64 { return int64(u>>1) ^ -int64(u&1) }

func (w *thriftWalker) skip(n uint64) error {
	if n > uint64(w.left()) {
		return fmt.Errorf("length %d exceeds the %d bytes left", n, w.left())
	}
	w.i += int(n)
	return nil
}

func (w *thriftWalker) structure(depth int) error {
	if depth > maxThriftDepth {
		return fmt.Errorf("nested deeper than %d", maxThriftDepth)
	}
	field := 0
	for {
		h, err := w.byte()
		if err != nil {
			return err
		}
		if h == 0 { // stop
			return nil
		}
		if d := int(h >> 4); d > 0 { // short form: delta from the previous field id
			field += d
		} else { // long form: the zigzag field id follows
			id, err := w.varint()
			if err != nil {
				return err
			}
			field = int(unzigzag(id))
		}
		t := h & 0x0f
		if depth <= 1 && w.onInt != nil && t >= 4 && t <= 6 {
			v, err := w.varint()
			if err != nil {
				return err
			}
			w.onInt(depth, field, unzigzag(v))
			continue
		}
		if err := w.value(t, depth, false); err != nil {
			return err
		}
	}
}

// value skips one value of type t; inList is true for list elements, where booleans take a byte.
func (w *thriftWalker) value(t byte, depth int, inList bool) error {
	switch t {
	case 1, 2: // boolean true/false, carried in the field header
		if inList {
			return w.skip(1)
		}
		return nil
	case 3: // byte
		return w.skip(1)
	case 4, 5, 6: // i16, i32, i64
		_, err := w.varint()
		return err
	case 7: // double
		return w.skip(8)
	case 8: // binary
		n, err := w.varint()
		if err != nil {
			return err
		}
		return w.skip(n)
	case 9, 10: // list, set
		h, err := w.byte()
		if err != nil {
			return err
		}
		n := uint64(h >> 4)
		if n == 15 {
			if n, err = w.varint(); err != nil {
				return err
			}
		}
		if n > uint64(w.left()) { // every element takes at least one byte
			return fmt.Errorf("list of %d elements in %d bytes", n, w.left())
		}
		for range n {
			if err := w.value(h&0x0f, depth+1, true); err != nil {
				return err
			}
		}
		return nil
	case 11: // map
		n, err := w.varint()
		if err != nil || n == 0 {
			return err
		}
		kv, err := w.byte()
		if err != nil {
			return err
		}
		if n > uint64(w.left()) {
			return fmt.Errorf("map of %d entries in %d bytes", n, w.left())
		}
		for range n {
			if err := w.value(kv>>4, depth+1, true); err != nil {
				return err
			}
			if err := w.value(kv&0x0f, depth+1, true); err != nil {
				return err
			}
		}
		return nil
	case 12: // struct
		return w.structure(depth + 1)
	case 13: // uuid
		return w.skip(16)
	}
	return fmt.Errorf("unknown type %d", t)
}

// Limits on one Parquet page, far above what writers produce (parquet-go writes pages of
// 256 KiB by default, Arrow and Spark about 1 MiB) and low enough that a corrupt header cannot
// make the library allocate gigabytes.
const (
	MaxPageBytes  = 256 << 20
	MaxPageValues = 64 << 20
)

// checkPages walks the page headers of one column chunk held in memory (PageHeader in the
// Parquet format's parquet.thrift: field 2 uncompressed_page_size, 3 compressed_page_size, and
// num_values as field 1 of the data, dictionary and v2 data page headers) and reports a page
// that does not fit in the chunk or exceeds MaxPageBytes or MaxPageValues.
func checkPages(chunk []byte) error {
	for off := 0; off < len(chunk); {
		var unc, comp, vals int64 = -1, -1, 0
		w := thriftWalker{b: chunk[off:], onInt: func(depth, field int, v int64) {
			switch {
			case depth == 0 && field == 2:
				unc = v
			case depth == 0 && field == 3:
				comp = v
			case depth == 1 && field == 1:
				vals = max(vals, v)
			}
		}}
		if err := w.structure(0); err != nil {
			return fmt.Errorf("page header at chunk byte %d: %v", off, err)
		}
		off += w.i
		switch {
		case comp < 0 || unc < 0:
			return fmt.Errorf("page header at chunk byte %d has no sizes", off-w.i)
		case comp > int64(len(chunk)-off):
			return fmt.Errorf("page of %d bytes at chunk byte %d overruns the %d-byte chunk", comp, off, len(chunk))
		case unc > MaxPageBytes || vals > MaxPageValues || vals < 0:
			return fmt.Errorf("page at chunk byte %d declares %d bytes and %d values, over the limits (%d, %d)", off, unc, vals, MaxPageBytes, MaxPageValues)
		}
		off += int(comp)
	}
	return nil
}
