package instr

import (
	"bufio"
	"bytes"
	"encoding/binary"
	"errors"
	"io"
	"math"
	"strconv"
	"strings"
	"testing"
)

// TestBlockHeader checks header parsing against the syntax of IEEE Std
// 488.2-1992 clause 8.7.9 <DEFINITE LENGTH ARBITRARY BLOCK RESPONSE
// DATA>: '#', one nonzero digit d, then d digits giving the byte count;
// and clause 8.7.10 <INDEFINITE LENGTH ARBITRARY BLOCK RESPONSE DATA>:
// "#0" then bytes up to NL^END (memory; the program-data forms of
// clause 7.7.6 share this syntax).
func TestBlockHeader(t *testing.T) {
	tests := []struct {
		name, in string
		want     int64
		rest     string // what remains after the header
	}{
		{"one digit", "#15hello", 5, "hello"},
		{"leading zeros allowed in count", "#3005abcde", 5, "abcde"},
		{"nine digits", "#9000000010" + "0123456789", 10, "0123456789"},
		{"zero-length definite", "#10\n", 0, "\n"},
		{"indefinite", "#0abc\n", -1, "abc\n"},
		{"text preamble", ":WAV:DATA #14abcd", 4, "abcd"},
		{"long form, not in 488.2", "#(12)abcdefghijkl", 12, "abcdefghijkl"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r := bufio.NewReader(strings.NewReader(tc.in))
			n, err := readBlockHeader(r)
			if err != nil || n != tc.want {
				t.Fatalf("readBlockHeader(%q) = %d, %v; want %d", tc.in, n, err, tc.want)
			}
			rest, _ := io.ReadAll(r)
			if string(rest) != tc.rest {
				t.Errorf("left %q, want %q", rest, tc.rest)
			}
		})
	}
}

func TestBlockHeaderErrors(t *testing.T) {
	tests := []struct {
		name, in, wantSub string
	}{
		{"no hash before newline", "1.0,2.0\n", "before any '#'"},
		{"letter after hash", "#A123", "expected a digit"},
		{"short count", "#3 12", "not a digit"},
		{"eof in count", "#41", "unexpected EOF"},
		{"long preamble", strings.Repeat("x", 100) + "#11a", "first 64 bytes"},
		{"empty long form", "#()", "bad long block length"},
		{"eof", "", "unexpected EOF"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := readBlockHeader(bufio.NewReader(strings.NewReader(tc.in)))
			if err == nil || !strings.Contains(err.Error(), tc.wantSub) {
				t.Fatalf("readBlockHeader(%q) error %v, want it to contain %q", tc.in, err, tc.wantSub)
			}
		})
	}
}

// TestDecodeFormats builds blocks with encoding/binary and math (the
// reference) and checks the decoder's volts = code·scale + offset.
func TestDecodeFormats(t *testing.T) {
	codes := []int{-32768, -1, 0, 1, 0x0A0A, 32767}
	scale, off := 1.0/3276.8, 0.25 // ±10 V over 16 bits, 0.25 V offset
	var be, le bytes.Buffer
	var i8, u8 []byte
	var ube, ule bytes.Buffer
	for _, c := range codes {
		binary.Write(&be, binary.BigEndian, int16(c))
		binary.Write(&le, binary.LittleEndian, int16(c))
		binary.Write(&ube, binary.BigEndian, uint16(c+32768))
		binary.Write(&ule, binary.LittleEndian, uint16(c+32768))
		i8 = append(i8, byte(int8(c>>8)))
		u8 = append(u8, byte((c+32768)>>8))
	}
	want16 := make([]float64, len(codes))
	want8 := make([]float64, len(codes))
	wantU16 := make([]float64, len(codes))
	wantU8 := make([]float64, len(codes))
	for i, c := range codes {
		want16[i] = float64(c)*scale + off
		want8[i] = float64(int8(c>>8))*scale + off
		wantU16[i] = float64(c+32768)*scale + off
		wantU8[i] = float64((c+32768)>>8)*scale + off
	}
	vals := []float64{math.Pi, -math.E, 1e-9, -0.0, math.MaxFloat32, 10}
	want32 := make([]float64, len(vals))
	for i, v := range vals {
		want32[i] = float64(float32(v))
	}
	var r32be, r32le, r64be, r64le bytes.Buffer
	for _, v := range vals {
		binary.Write(&r32be, binary.BigEndian, float32(v))
		binary.Write(&r32le, binary.LittleEndian, float32(v))
		binary.Write(&r64be, binary.BigEndian, v)
		binary.Write(&r64le, binary.LittleEndian, v)
	}
	tests := []struct {
		name string
		data []byte
		f    DataFormat
		want []float64
	}{
		{"int16 big-endian", be.Bytes(), DataFormat{Encoding: Int16, Scale: scale, Offset: off}, want16},
		{"int16 little-endian", le.Bytes(), DataFormat{Encoding: Int16, LittleEndian: true, Scale: scale, Offset: off}, want16},
		{"int8", i8, DataFormat{Encoding: Int8, Scale: scale, Offset: off}, want8},
		{"uint8", u8, DataFormat{Encoding: Uint8, Scale: scale, Offset: off}, wantU8},
		{"uint16 big-endian", ube.Bytes(), DataFormat{Encoding: Uint16, Scale: scale, Offset: off}, wantU16},
		{"uint16 little-endian", ule.Bytes(), DataFormat{Encoding: Uint16, LittleEndian: true, Scale: scale, Offset: off}, wantU16},
		{"real32 big-endian", r32be.Bytes(), DataFormat{Encoding: Real32}, want32},
		{"real32 little-endian", r32le.Bytes(), DataFormat{Encoding: Real32, LittleEndian: true}, want32},
		{"real64 big-endian", r64be.Bytes(), DataFormat{Encoding: Real64}, vals},
		{"real64 little-endian", r64le.Bytes(), DataFormat{Encoding: Real64, LittleEndian: true}, vals},
	}
	for _, tc := range tests {
		for _, form := range []string{"definite", "indefinite"} {
			t.Run(tc.name+" "+form, func(t *testing.T) {
				var msg []byte
				if form == "definite" {
					msg = append([]byte(blockHeader(len(tc.data))), tc.data...)
				} else {
					msg = append([]byte("#0"), tc.data...)
				}
				msg = append(msg, '\n')
				var d decoder
				got := make([]float64, len(tc.want))
				r := bufio.NewReaderSize(bytes.NewReader(msg), 16)
				if err := d.readBlock(r, tc.f, got); err != nil {
					t.Fatal(err)
				}
				for i := range got {
					if got[i] != tc.want[i] && !(math.Signbit(got[i]) == math.Signbit(tc.want[i]) && got[i] == 0) {
						t.Errorf("[%d] = %v, want %v", i, got[i], tc.want[i])
					}
				}
				if rest, _ := io.ReadAll(r); string(rest) != "\n" {
					t.Errorf("left %q after the block, want the terminator", rest)
				}
			})
		}
	}
}

// blockHeader writes a definite-length header per IEEE 488.2 8.7.9.
func blockHeader(n int) string {
	c := strconv.Itoa(n)
	return "#" + strconv.Itoa(len(c)) + c
}

func TestDecodeASCIIEOF(t *testing.T) {
	err := decodeASCII(bufio.NewReader(strings.NewReader("1,2")), DataFormat{}, make([]float64, 3))
	if !errors.Is(err, io.ErrUnexpectedEOF) {
		t.Fatalf("err = %v, want io.ErrUnexpectedEOF", err)
	}
}

func TestDecodeASCIIErrors(t *testing.T) {
	tests := []struct {
		in, wantSub string
		n           int
	}{
		{"1,2\n", "got 2 values, want 3", 3},
		{"1,2,3,4\n", "more than 3", 3},
		{"1,,3\n", "empty value at position 2", 3},
		{"1,x,3\n", `value 2 "x" is not a number`, 3},
		{"\n", "empty reply", 3},
	}
	for _, tc := range tests {
		t.Run(tc.in, func(t *testing.T) {
			r := bufio.NewReader(strings.NewReader(tc.in + "NEXT\n"))
			err := decodeASCII(r, DataFormat{}, make([]float64, tc.n))
			if err == nil || !strings.Contains(err.Error(), tc.wantSub) {
				t.Fatalf("error %v, want %q", err, tc.wantSub)
			}
			var be *BlockError
			if errors.As(err, &be) {
				// The bad line was consumed up to its newline.
				rest, _ := io.ReadAll(r)
				if string(rest) != "\nNEXT\n" {
					t.Errorf("left %q, want the newline and the next reply", rest)
				}
			}
		})
	}
}

// FuzzReadBlock feeds arbitrary replies to the block reader: it must not
// panic, must never read past the block it reports, and a block made by
// the reference encoder must decode to its values.
func FuzzReadBlock(f *testing.F) {
	f.Add([]byte("#18\x00\x00\x80?\x00\x00\x00@\n"), uint8(Real32), false)
	f.Add([]byte("#0\x01\x02\n"), uint8(Int8), false)
	f.Add([]byte("CH1,#14\x00\n\x00\x0a\n"), uint8(Int16), true)
	f.Add([]byte("1,2,3\n"), uint8(ASCII), false)
	f.Add([]byte("#(8)\x00\x00\x00\x00\x00\x00\xf0?\n"), uint8(Real64), true)
	f.Fuzz(func(t *testing.T, msg []byte, enc uint8, little bool) {
		e := Encoding(enc % 7)
		for _, n := range []int{0, 1, 2, 3} {
			var d decoder
			dst := make([]float64, n)
			r := bufio.NewReaderSize(bytes.NewReader(msg), 16)
			_ = d.readBlock(r, DataFormat{Encoding: e, LittleEndian: little}, dst)
		}
	})
}

func FuzzBlockRoundTrip(f *testing.F) {
	f.Add([]byte{0, 1, 2, 3, 10, 10, 13, 10}, false)
	f.Add([]byte("\n\n\n\n"), true)
	f.Fuzz(func(t *testing.T, data []byte, little bool) {
		data = data[:len(data)/4*4]
		var want []float64
		for i := 0; i < len(data); i += 4 {
			var u uint32
			if little {
				u = binary.LittleEndian.Uint32(data[i:])
			} else {
				u = binary.BigEndian.Uint32(data[i:])
			}
			want = append(want, float64(math.Float32frombits(u)))
		}
		msg := append(append([]byte(blockHeader(len(data))), data...), '\n')
		var d decoder
		got := make([]float64, len(want))
		if err := d.readBlock(bufio.NewReaderSize(bytes.NewReader(msg), 16), DataFormat{Encoding: Real32, LittleEndian: little}, got); err != nil {
			t.Fatalf("block of %d bytes: %v", len(data), err)
		}
		for i := range got {
			// == rather than bit equality: -0 + offset 0 is +0, the same volts.
			if got[i] != want[i] && !(math.IsNaN(got[i]) && math.IsNaN(want[i])) {
				t.Fatalf("[%d] = %v, want %v", i, got[i], want[i])
			}
		}
	})
}
