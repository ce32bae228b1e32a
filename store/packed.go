package store

import (
	"encoding/binary"
	"errors"
	"maps"
	"sort"
	"time"
	"unsafe"
)

// packedVersion is the first byte of a packed lot.
const packedVersion = 1

// appendPacked appends the packed form of a lot's stored values: a
// version byte, the id as a uvarint, time and recorded as 8-byte little-endian nanoseconds,
// varints (encoding/binary) for inspected, count and revision,
// length-prefixed strings for lot, shift,
// inspector, note, recorded_by and reason, and the category counts — each
// a uvarint k (the category's position in the process's list, from 1; 0
// for a name outside it, followed by the name) and a varint count. Known
// categories come first in the process's order, other names after them
// sorted, so the packed form of given values is always the same bytes.
func appendPacked(b []byte, l *Lot, cats []string) []byte {
	b = append(b, packedVersion)
	b = binary.AppendUvarint(b, uint64(l.ID))
	b = binary.LittleEndian.AppendUint64(b, uint64(l.Time.UnixNano()))
	b = binary.LittleEndian.AppendUint64(b, uint64(nanos(l.Recorded)))
	b = binary.AppendVarint(b, l.Inspected)
	b = binary.AppendVarint(b, l.Count)
	b = binary.AppendUvarint(b, uint64(l.Revision))
	for _, s := range [...]string{l.Lot, l.Shift, l.Inspector, l.Note, l.RecordedBy, l.Reason} {
		b = binary.AppendUvarint(b, uint64(len(s)))
		b = append(b, s...)
	}
	b = binary.AppendUvarint(b, uint64(len(l.Categories)))
	if len(l.Categories) == 0 {
		return b
	}
	n := 0
	for i, c := range cats {
		if v, ok := l.Categories[c]; ok {
			b = binary.AppendUvarint(b, uint64(i+1))
			b = binary.AppendVarint(b, v)
			n++
		}
	}
	if n == len(l.Categories) {
		return b
	}
	known := make(map[string]bool, len(cats))
	for _, c := range cats {
		known[c] = true
	}
	var other []string
	for c := range l.Categories {
		if !known[c] {
			other = append(other, c)
		}
	}
	sort.Strings(other)
	for _, c := range other {
		b = binary.AppendUvarint(b, 0)
		b = binary.AppendUvarint(b, uint64(len(c)))
		b = append(b, c...)
		b = binary.AppendVarint(b, l.Categories[c])
	}
	return b
}

var errPacked = errors.New("packed lot is malformed")

// packedReader decodes a packed lot without allocating beyond the
// strings handed out. It keeps an offset into b rather than reslicing b,
// so that reading a value writes no pointer (no write barrier while the
// collector runs).
type packedReader struct {
	b   []byte
	i   int // the next byte to read
	err error
}

// rest returns the bytes not read yet.
func (r *packedReader) rest() []byte { return r.b[r.i:] }

// fail marks the packed lot malformed and stops reading.
func (r *packedReader) fail() {
	r.err, r.i = errPacked, len(r.b)
}

func (r *packedReader) varint() int64 {
	if r.i < len(r.b) && r.b[r.i] < 0x80 { // one byte: most counts
		u := r.b[r.i]
		r.i++
		return int64(u>>1) ^ -int64(u&1)
	}
	v, n := binary.Varint(r.b[r.i:])
	if n <= 0 {
		r.fail()
		return 0
	}
	r.i += n
	return v
}

func (r *packedReader) uvarint() uint64 {
	if r.i < len(r.b) && r.b[r.i] < 0x80 {
		u := r.b[r.i]
		r.i++
		return uint64(u)
	}
	v, n := binary.Uvarint(r.b[r.i:])
	if n <= 0 {
		r.fail()
		return 0
	}
	r.i += n
	return v
}

func (r *packedReader) bytes() []byte {
	n := r.uvarint()
	if n > uint64(len(r.b)-r.i) {
		r.fail()
		return nil
	}
	s := r.b[r.i : r.i+int(n)]
	r.i += int(n)
	return s
}

// lotReader decodes the packed lots of one walk. It hands out the lot
// codes from shared blocks of bytes (one allocation per some thousand
// lots instead of one per lot), keeps the strings of repeating text, and
// refills one Categories map in place.
type lotReader struct {
	names []string // the process's categories
	loc   *time.Location
	words *interner
	cats  map[string]int64
	mask  uint64 // which of names the map holds now (when it holds only those)
	block []byte
	// recent holds, per repeating text field, the strings met last.
	recent [5]recentWords
	// combos hands out one map per combination of category counts met
	// (lots repeat them: mostly small counts of a few categories), so a
	// lot's counts cost one lookup; beyond maxCombos, cats is refilled.
	combos map[string]map[string]int64
	// textCache and countsCache are small caches, indexed by a hash of the packed
	// bytes, in front of recent and combos: most lots repeat a few
	// combinations of text and of counts, so one short comparison finds
	// them. lastText and lastCounts name the entries that the Lot being
	// filled holds now (-1: none), so that a lot repeating them is not
	// written over at all.
	textCache   [64]textEntry
	countsCache [256]countsEntry
	lastText    int
	lastCounts  int
}

// textEntry is the shift, inspector, note, recorded_by and reason of a
// lot, keyed by their packed bytes.
type textEntry struct {
	key string
	s   [5]string
}

// countsEntry is a shared Categories map, keyed by its packed bytes.
type countsEntry struct {
	key string
	m   map[string]int64
}

// maxTextKey bounds the packed text kept as a key in texts.
const maxTextKey = 128

// shortHash is FNV-1a (Fowler, Noll, Vo) of b: a cheap spread of short
// keys over the cache entries.
func shortHash(b []byte) uint32 {
	h := uint32(2166136261)
	for _, c := range b {
		h ^= uint32(c)
		h *= 16777619
	}
	return h
}

const maxCombos = 4096

func newLotReader(names []string, loc *time.Location) *lotReader {
	return &lotReader{names: names, loc: loc, words: newInterner(), cats: map[string]int64{}, combos: map[string]map[string]int64{},
		lastText: -1, lastCounts: -1}
}

// code returns b as a string that lives in the current block.
func (lr *lotReader) code(b []byte) string {
	if len(b) == 0 {
		return ""
	}
	if len(b) > 256 {
		return string(b)
	}
	if cap(lr.block)-len(lr.block) < len(b) {
		lr.block = make([]byte, 0, 64<<10)
	}
	start := len(lr.block)
	lr.block = append(lr.block, b...)
	// The block is only appended to, so the bytes never change.
	return unsafe.String(&lr.block[start], len(b))
}

// unpack fills l (but ProcessID) from the packed lot b.
func (lr *lotReader) unpack(b []byte, l *Lot) error {
	if len(b) < 1 || b[0] != packedVersion {
		return errPacked
	}
	id, k := binary.Uvarint(b[1:])
	if k <= 0 || len(b) < 1+k+16 {
		return errPacked
	}
	b = b[1+k:]
	l.ID = int64(id)
	t := int64(binary.LittleEndian.Uint64(b))
	rec := int64(binary.LittleEndian.Uint64(b[8:]))
	r := packedReader{b: b[16:]}
	l.Inspected = r.varint()
	l.Count = r.varint()
	l.Revision = int(r.uvarint())
	l.Lot = lr.code(r.bytes())
	// The other text repeats from lot to lot (a few shifts, inspectors).
	start := r.i
	var words [5][]byte
	for i := range words {
		words[i] = r.bytes()
	}
	text := r.b[start:r.i]
	if r.err != nil {
		return errPacked
	}
	lr.text(l, text, &words)
	n := r.uvarint()
	if n == 0 || r.err != nil {
		l.Categories = nil
		lr.lastCounts = -1
	} else if err := lr.counts(l, &r, n); err != nil {
		return err
	}
	if r.err != nil || r.i != len(r.b) {
		return errPacked
	}
	l.Time = fromNanos(t, lr.loc)
	l.Recorded = fromNanos(rec, lr.loc)
	return nil
}

// text sets the text fields of l from their packed bytes text (split
// into words).
func (lr *lotReader) text(l *Lot, text []byte, words *[5][]byte) {
	h := -1
	if len(text) <= maxTextKey {
		h = int(shortHash(text) % uint32(len(lr.textCache)))
		if e := &lr.textCache[h]; e.key == string(text) {
			if lr.lastText != h {
				l.Shift, l.Inspector, l.Note, l.RecordedBy, l.Reason = e.s[0], e.s[1], e.s[2], e.s[3], e.s[4]
				lr.lastText = h
			}
			return
		}
	}
	// The strings met last are compared first, then the shared ones.
	var s [5]string
	for i, w := range words {
		s[i] = lr.recent[i].get(lr.words, w)
	}
	l.Shift, l.Inspector, l.Note, l.RecordedBy, l.Reason = s[0], s[1], s[2], s[3], s[4]
	lr.lastText = -1
	if h >= 0 {
		lr.textCache[h] = textEntry{key: string(text), s: s}
		lr.lastText = h
	}
}

// counts sets l.Categories from the n packed category counts at r, the
// last part of the packed lot.
func (lr *lotReader) counts(l *Lot, r *packedReader, n uint64) error {
	key := r.rest()
	h := int(shortHash(key) % uint32(len(lr.countsCache)))
	if e := &lr.countsCache[h]; e.m != nil && e.key == string(key) {
		if lr.lastCounts != h {
			l.Categories = e.m
			lr.lastCounts = h
		}
		r.i = len(r.b)
		return nil
	}
	lr.lastCounts = -1
	if m, ok := lr.combos[string(key)]; ok {
		l.Categories = m
		r.i = len(r.b)
	} else {
		if err := lr.categories(r, n); err != nil {
			return err
		}
		l.Categories = lr.cats
		if len(lr.combos) >= maxCombos || r.i != len(r.b) {
			return nil
		}
		m := maps.Clone(lr.cats)
		lr.combos[string(key)] = m
		l.Categories = m
	}
	lr.countsCache[h] = countsEntry{key: string(key), m: l.Categories}
	lr.lastCounts = h
	return nil
}

func (lr *lotReader) categories(r *packedReader, n uint64) error {
	// Most lots name the same categories as the lot before: then only the
	// counts are written over.
	var mask uint64
	rest := r.i
	simple := len(lr.names) <= 64
	for i := uint64(0); i < n && simple; i++ {
		k := r.uvarint()
		r.varint()
		if k == 0 || k > uint64(len(lr.names)) {
			simple = false
		} else {
			mask |= 1 << (k - 1)
		}
	}
	r.i, r.err = rest, nil
	if !simple || mask != lr.mask {
		clear(lr.cats)
		lr.mask = 0
	}
	for i := uint64(0); i < n && r.err == nil; i++ {
		k := r.uvarint()
		var name string
		switch {
		case k == 0:
			name = string(r.bytes())
		case k <= uint64(len(lr.names)):
			name = lr.names[k-1]
		default:
			return errPacked
		}
		lr.cats[name] = r.varint()
	}
	if simple {
		lr.mask = mask
	} else {
		lr.mask = ^uint64(0) // a name outside the list: clear next time
	}
	return r.err
}

// recentWords is a field's last few distinct strings, tried before a map
// lookup (comparing a few short strings costs less than hashing).
type recentWords struct {
	s    [4]string
	next int
}

func (rw *recentWords) get(words *interner, b []byte) string {
	for _, s := range rw.s {
		if string(b) == s {
			return s
		}
	}
	s := words.get(b)
	rw.s[rw.next] = s
	rw.next = (rw.next + 1) % len(rw.s)
	return s
}
