package instr

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
)

// Encoding is how a digitizer sends samples.
type Encoding int

const (
	ASCII  Encoding = iota // comma-separated decimal numbers ended by newline
	Int8                   // signed 8-bit codes in a block
	Int16                  // signed 16-bit codes in a block
	Real32                 // IEEE 754 binary32 in a block
	Real64                 // IEEE 754 binary64 in a block
	Uint8                  // unsigned 8-bit codes in a block (SCPI UINTeger,8)
	Uint16                 // unsigned 16-bit codes in a block
)

// Size is the bytes per sample in a block (0 for ASCII).
func (e Encoding) Size() int {
	switch e {
	case Int8, Uint8:
		return 1
	case Int16, Uint16:
		return 2
	case Real32:
		return 4
	case Real64:
		return 8
	}
	return 0
}

func (e Encoding) String() string {
	switch e {
	case ASCII:
		return "ascii"
	case Int8:
		return "int8"
	case Int16:
		return "int16"
	case Real32:
		return "real32"
	case Real64:
		return "real64"
	case Uint8:
		return "uint8"
	case Uint16:
		return "uint16"
	}
	return "encoding(" + strconv.Itoa(int(e)) + ")"
}

// ParseEncoding parses "ascii", "int8", "int16", "uint8", "uint16",
// "real32" or "real64".
func ParseEncoding(s string) (Encoding, error) {
	for e := ASCII; e <= Uint16; e++ {
		if s == e.String() {
			return e, nil
		}
	}
	return 0, fmt.Errorf("data format %q: want ascii, int8, int16, uint8, uint16, real32 or real64", s)
}

// DataFormat says how to turn a reply into volts:
//
//	volts = value·Scale + Offset
//
// where value is the integer code or the decoded number. The zero value
// is ASCII numbers taken as volts (a zero Scale means 1).
type DataFormat struct {
	Encoding     Encoding
	LittleEndian bool    // byte order of binary samples (SCPI FORMat:BORDer SWAPped); false is NORMal, big-endian
	Scale        float64 // volts per unit of value; 0 means 1
	Offset       float64 // volts added after scaling
}

func (f DataFormat) scale() float64 {
	if f.Scale == 0 {
		return 1
	}
	return f.Scale
}

// BlockError reports a malformed or unexpected block.
type BlockError struct {
	Reason string
	inStep bool // the bad reply was consumed to its end
}

func (e *BlockError) Error() string { return "block: " + e.Reason }

func blockErr(format string, a ...any) error {
	return &BlockError{Reason: fmt.Sprintf(format, a...)}
}

// consumedErr is a BlockError after which the reply has been read to
// its end, so the next reply is in step.
func consumedErr(format string, a ...any) error {
	return &BlockError{Reason: fmt.Sprintf(format, a...), inStep: true}
}

// maxPreamble is how much ASCII text may precede the '#' of a block
// (some instruments echo a header such as ":WAV:DATA " or "CH1,").
const maxPreamble = 64

// readBlockHeader reads an IEEE 488.2 arbitrary block response header
// (IEEE Std 488.2-1992 clause 8.7.9 definite length, 8.7.10 indefinite
// length; the program-data forms in 7.7.6 are the same syntax; memory):
//
//	#<d><d digits: byte count>   d = '1'..'9', definite length
//	#0                           indefinite: bytes up to NL with END
//	#(<count>)                   long form for counts of more than nine
//	                             digits, used by some instruments (not
//	                             in IEEE 488.2; memory)
//
// It skips up to maxPreamble bytes of text before the '#'. It returns
// the byte count, or -1 for an indefinite block.
func readBlockHeader(r *bufio.Reader) (int64, error) {
	for i := 0; ; i++ {
		b, err := r.ReadByte()
		if err != nil {
			return 0, unexpectedEOF(err, "before block header")
		}
		if b == '#' {
			break
		}
		if b == '\n' {
			return 0, blockErr("reply ended before any '#' block header")
		}
		if i >= maxPreamble {
			return 0, blockErr("no '#' block header within the first %d bytes", maxPreamble)
		}
	}
	d, err := r.ReadByte()
	if err != nil {
		return 0, unexpectedEOF(err, "in block header")
	}
	switch {
	case d == '0':
		return -1, nil
	case d >= '1' && d <= '9':
		var n int64
		for i := 0; i < int(d-'0'); i++ {
			c, err := r.ReadByte()
			if err != nil {
				return 0, unexpectedEOF(err, "in block length")
			}
			if c < '0' || c > '9' {
				return 0, blockErr("length digit %d of %c is %q, not a digit", i+1, d, c)
			}
			n = n*10 + int64(c-'0')
		}
		return n, nil
	case d == '(':
		var n int64
		for i := 0; ; i++ {
			c, err := r.ReadByte()
			if err != nil {
				return 0, unexpectedEOF(err, "in long block length")
			}
			if c == ')' && i > 0 {
				return n, nil
			}
			if c < '0' || c > '9' || i >= 18 {
				return 0, blockErr("bad long block length: byte %q at position %d", c, i+1)
			}
			n = n*10 + int64(c-'0')
		}
	}
	return 0, blockErr("after '#' expected a digit 0..9, got %q", d)
}

func unexpectedEOF(err error, where string) error {
	if err == io.EOF {
		err = io.ErrUnexpectedEOF
	}
	return fmt.Errorf("%s: %w", where, err)
}

// decoder turns blocks into float64 samples with a reusable scratch
// buffer, so a fetch allocates nothing however long the record.
type decoder struct {
	scratch []byte
}

const scratchSize = 256 << 10

// readBlock reads one block (header and data, not the terminator) from
// r into dst, decoding with f. The block must hold exactly len(dst)
// samples; when it does not, the block is still consumed so the next
// reply is read in step, and a BlockError is returned.
func (d *decoder) readBlock(r *bufio.Reader, f DataFormat, dst []float64) error {
	if f.Encoding == ASCII {
		return decodeASCII(r, f, dst)
	}
	size := f.Encoding.Size()
	if size == 0 {
		return blockErr("unknown data format %v", f.Encoding)
	}
	n, err := readBlockHeader(r)
	if err != nil {
		return err
	}
	want := int64(len(dst)) * int64(size)
	if n < 0 {
		// Indefinite: the data ends with NL^END; as binary data may hold
		// 0x0A bytes, read the expected count and then demand the NL.
		if err := d.decode(r, f, dst); err != nil {
			return err
		}
		b, err := r.ReadByte()
		if err != nil {
			return unexpectedEOF(err, "after indefinite block")
		}
		if b != '\n' {
			if _, err := r.ReadSlice('\n'); err != nil && !errors.Is(err, bufio.ErrBufferFull) {
				return unexpectedEOF(err, "draining indefinite block")
			}
			return consumedErr("indefinite block longer than %d samples of %d bytes", len(dst), size)
		}
		if err := r.UnreadByte(); err != nil {
			return err
		}
		return nil
	}
	if n != want {
		if _, err := io.CopyN(io.Discard, r, n); err != nil {
			return unexpectedEOF(err, fmt.Sprintf("draining block of %d bytes", n))
		}
		return consumedErr("block holds %d bytes, want %d (%d samples of %s)", n, want, len(dst), f.Encoding)
	}
	return d.decode(r, f, dst)
}

// decode reads len(dst)·size bytes from r and converts them into dst.
func (d *decoder) decode(r io.Reader, f DataFormat, dst []float64) error {
	if d.scratch == nil {
		d.scratch = make([]byte, scratchSize)
	}
	size := f.Encoding.Size()
	per := len(d.scratch) / size
	scale, off := f.scale(), f.Offset
	done := 0
	for done < len(dst) {
		k := min(per, len(dst)-done)
		buf := d.scratch[:k*size]
		if m, err := io.ReadFull(r, buf); err != nil {
			return unexpectedEOF(err, fmt.Sprintf("block data: got %d of %d bytes", done*size+m, len(dst)*size))
		}
		convert(f.Encoding, f.LittleEndian, buf, dst[done:done+k], scale, off)
		done += k
	}
	return nil
}

// convert decodes len(out) samples from buf (len(out)·size bytes).
// Each case walks buf and out in step so the compiler can drop bounds
// checks from the inner loop.
func convert(e Encoding, little bool, buf []byte, out []float64, scale, off float64) {
	switch e {
	case Int8:
		buf = buf[:len(out)]
		for i, b := range buf {
			out[i] = float64(int8(b))*scale + off
		}
	case Uint8:
		buf = buf[:len(out)]
		for i, b := range buf {
			out[i] = float64(b)*scale + off
		}
	case Int16:
		if little {
			for i := range out {
				b := buf[2*i : 2*i+2 : 2*i+2]
				out[i] = float64(int16(uint16(b[0])|uint16(b[1])<<8))*scale + off
			}
		} else {
			for i := range out {
				b := buf[2*i : 2*i+2 : 2*i+2]
				out[i] = float64(int16(uint16(b[1])|uint16(b[0])<<8))*scale + off
			}
		}
	case Uint16:
		if little {
			for i := range out {
				b := buf[2*i : 2*i+2 : 2*i+2]
				out[i] = float64(uint16(b[0])|uint16(b[1])<<8)*scale + off
			}
		} else {
			for i := range out {
				b := buf[2*i : 2*i+2 : 2*i+2]
				out[i] = float64(uint16(b[1])|uint16(b[0])<<8)*scale + off
			}
		}
	case Real32:
		if little {
			for i := range out {
				out[i] = float64(math.Float32frombits(binary.LittleEndian.Uint32(buf[4*i:])))*scale + off
			}
		} else {
			for i := range out {
				out[i] = float64(math.Float32frombits(binary.BigEndian.Uint32(buf[4*i:])))*scale + off
			}
		}
	case Real64:
		if little {
			for i := range out {
				out[i] = math.Float64frombits(binary.LittleEndian.Uint64(buf[8*i:]))*scale + off
			}
		} else {
			for i := range out {
				out[i] = math.Float64frombits(binary.BigEndian.Uint64(buf[8*i:]))*scale + off
			}
		}
	}
}

// decodeASCII reads len(dst) comma-separated numbers ended by newline.
// Spaces around numbers are allowed. Too few or too many values is a
// BlockError; the rest of the line is consumed either way.
func decodeASCII(r *bufio.Reader, f DataFormat, dst []float64) error {
	scale, off := f.scale(), f.Offset
	var tok [40]byte
	n := 0
	count := 0
	for {
		b, err := r.ReadByte()
		if err != nil {
			return unexpectedEOF(err, fmt.Sprintf("ascii data after %d values", count))
		}
		switch b {
		case ',', '\n':
			t := trimSpace(tok[:n])
			if len(t) == 0 {
				if b == '\n' && count == 0 {
					_ = r.UnreadByte()
					return consumedErr("ascii data: empty reply, want %d values", len(dst))
				}
				if b == '\n' && count == len(dst) {
					return r.UnreadByte() // a trailing comma, as some instruments send
				}
				return skipLine(r, b, consumedErr("ascii data: empty value at position %d", count+1))
			}
			if count >= len(dst) {
				return skipLine(r, b, consumedErr("ascii data: more than %d values", len(dst)))
			}
			v, err := strconv.ParseFloat(string(t), 64)
			if err != nil {
				return skipLine(r, b, consumedErr("ascii data: value %d %q is not a number", count+1, t))
			}
			dst[count] = v*scale + off
			count++
			n = 0
			if b == '\n' {
				_ = r.UnreadByte()
				if count != len(dst) {
					return consumedErr("ascii data: got %d values, want %d", count, len(dst))
				}
				return nil
			}
		default:
			if n == len(tok) {
				return skipLine(r, b, consumedErr("ascii data: value %d longer than %d bytes", count+1, len(tok)))
			}
			tok[n] = b
			n++
		}
	}
}

// skipLine consumes the rest of the line unless last already ended it,
// then returns err. The newline itself is left for the caller.
func skipLine(r *bufio.Reader, last byte, err error) error {
	if last != '\n' {
		for {
			b, e := r.ReadByte()
			if e != nil {
				return err
			}
			if b == '\n' {
				break
			}
		}
	}
	_ = r.UnreadByte()
	return err
}

func trimSpace(b []byte) []byte {
	for len(b) > 0 && (b[0] == ' ' || b[0] == '\t' || b[0] == '\r') {
		b = b[1:]
	}
	for len(b) > 0 && (b[len(b)-1] == ' ' || b[len(b)-1] == '\t' || b[len(b)-1] == '\r') {
		b = b[:len(b)-1]
	}
	return b
}
