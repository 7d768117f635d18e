//go:build amd64 && !purego

#include "textflag.h"

// AVX2+FMA kernels of the single-bin DFT sums, both channels in one pass
// so that each table vector is loaded once for the two channels. Each
// accumulator holds four partial sums (one per lane); the caller adds the
// lanes. n is a multiple of 4; the caller does the tail. Go assembler
// operand order: VFMADD231PD a, b, acc is acc += a·b; VSUBPD o, y, u is
// u = y − o.

// func fund2AVX2(y1, y2, tr, ti *float64, n int, o1, o2 float64, out *[32]float64)
// out[0:4] Σu1, [4:8] Σu1², [8:12] Σu1·tr, [12:16] Σu1·ti, [16:32] the same
// for u2; u1 = y1 − o1, u2 = y2 − o2.
TEXT ·fund2AVX2(SB), NOSPLIT, $0-64
	MOVQ         y1+0(FP), SI
	MOVQ         y2+8(FP), DI
	MOVQ         tr+16(FP), R8
	MOVQ         ti+24(FP), R9
	MOVQ         n+32(FP), CX
	VBROADCASTSD o1+40(FP), Y14
	VBROADCASTSD o2+48(FP), Y15
	MOVQ         out+56(FP), DX
	VXORPD       Y0, Y0, Y0
	VXORPD       Y1, Y1, Y1
	VXORPD       Y2, Y2, Y2
	VXORPD       Y3, Y3, Y3
	VXORPD       Y4, Y4, Y4
	VXORPD       Y5, Y5, Y5
	VXORPD       Y6, Y6, Y6
	VXORPD       Y7, Y7, Y7
	XORQ         AX, AX
	MOVQ         CX, BX
	ANDQ         $-8, BX
	JZ           fund4

fund8:
	VMOVUPD     (R8)(AX*8), Y8
	VMOVUPD     (R9)(AX*8), Y9
	VMOVUPD     (SI)(AX*8), Y10
	VSUBPD      Y14, Y10, Y10
	VMOVUPD     (DI)(AX*8), Y11
	VSUBPD      Y15, Y11, Y11
	VADDPD      Y10, Y0, Y0
	VFMADD231PD Y10, Y10, Y1
	VFMADD231PD Y8, Y10, Y2
	VFMADD231PD Y9, Y10, Y3
	VADDPD      Y11, Y4, Y4
	VFMADD231PD Y11, Y11, Y5
	VFMADD231PD Y8, Y11, Y6
	VFMADD231PD Y9, Y11, Y7
	VMOVUPD     32(R8)(AX*8), Y8
	VMOVUPD     32(R9)(AX*8), Y9
	VMOVUPD     32(SI)(AX*8), Y12
	VSUBPD      Y14, Y12, Y12
	VMOVUPD     32(DI)(AX*8), Y13
	VSUBPD      Y15, Y13, Y13
	VADDPD      Y12, Y0, Y0
	VFMADD231PD Y12, Y12, Y1
	VFMADD231PD Y8, Y12, Y2
	VFMADD231PD Y9, Y12, Y3
	VADDPD      Y13, Y4, Y4
	VFMADD231PD Y13, Y13, Y5
	VFMADD231PD Y8, Y13, Y6
	VFMADD231PD Y9, Y13, Y7
	ADDQ        $8, AX
	CMPQ        AX, BX
	JLT         fund8

fund4:
	CMPQ        AX, CX
	JGE         fundout
	VMOVUPD     (R8)(AX*8), Y8
	VMOVUPD     (R9)(AX*8), Y9
	VMOVUPD     (SI)(AX*8), Y10
	VSUBPD      Y14, Y10, Y10
	VMOVUPD     (DI)(AX*8), Y11
	VSUBPD      Y15, Y11, Y11
	VADDPD      Y10, Y0, Y0
	VFMADD231PD Y10, Y10, Y1
	VFMADD231PD Y8, Y10, Y2
	VFMADD231PD Y9, Y10, Y3
	VADDPD      Y11, Y4, Y4
	VFMADD231PD Y11, Y11, Y5
	VFMADD231PD Y8, Y11, Y6
	VFMADD231PD Y9, Y11, Y7
	ADDQ        $4, AX
	JMP         fund4

fundout:
	VMOVUPD    Y0, 0(DX)
	VMOVUPD    Y1, 32(DX)
	VMOVUPD    Y2, 64(DX)
	VMOVUPD    Y3, 96(DX)
	VMOVUPD    Y4, 128(DX)
	VMOVUPD    Y5, 160(DX)
	VMOVUPD    Y6, 192(DX)
	VMOVUPD    Y7, 224(DX)
	VZEROUPPER
	RET

// func harm2AVX2(y1, y2, r2, i2, r3, i3 *float64, n int, o1, o2 float64, out *[32]float64)
// out[0:4] Σu1·r2, [4:8] Σu1·i2, [8:12] Σu1·r3, [12:16] Σu1·i3, [16:32]
// the same for u2.
TEXT ·harm2AVX2(SB), NOSPLIT, $0-80
	MOVQ         y1+0(FP), SI
	MOVQ         y2+8(FP), DI
	MOVQ         r2+16(FP), R8
	MOVQ         i2+24(FP), R9
	MOVQ         r3+32(FP), R10
	MOVQ         i3+40(FP), R11
	MOVQ         n+48(FP), CX
	VBROADCASTSD o1+56(FP), Y14
	VBROADCASTSD o2+64(FP), Y15
	MOVQ         out+72(FP), DX
	VXORPD       Y0, Y0, Y0
	VXORPD       Y1, Y1, Y1
	VXORPD       Y2, Y2, Y2
	VXORPD       Y3, Y3, Y3
	VXORPD       Y4, Y4, Y4
	VXORPD       Y5, Y5, Y5
	VXORPD       Y6, Y6, Y6
	VXORPD       Y7, Y7, Y7
	XORQ         AX, AX

harm4:
	CMPQ        AX, CX
	JGE         harmout
	VMOVUPD     (R8)(AX*8), Y8
	VMOVUPD     (R9)(AX*8), Y9
	VMOVUPD     (R10)(AX*8), Y10
	VMOVUPD     (R11)(AX*8), Y11
	VMOVUPD     (SI)(AX*8), Y12
	VSUBPD      Y14, Y12, Y12
	VMOVUPD     (DI)(AX*8), Y13
	VSUBPD      Y15, Y13, Y13
	VFMADD231PD Y8, Y12, Y0
	VFMADD231PD Y9, Y12, Y1
	VFMADD231PD Y10, Y12, Y2
	VFMADD231PD Y11, Y12, Y3
	VFMADD231PD Y8, Y13, Y4
	VFMADD231PD Y9, Y13, Y5
	VFMADD231PD Y10, Y13, Y6
	VFMADD231PD Y11, Y13, Y7
	ADDQ        $4, AX
	JMP         harm4

harmout:
	VMOVUPD    Y0, 0(DX)
	VMOVUPD    Y1, 32(DX)
	VMOVUPD    Y2, 64(DX)
	VMOVUPD    Y3, 96(DX)
	VMOVUPD    Y4, 128(DX)
	VMOVUPD    Y5, 160(DX)
	VMOVUPD    Y6, 192(DX)
	VMOVUPD    Y7, 224(DX)
	VZEROUPPER
	RET

// func hannFund2AVX2(d1, d2, y1, y2, hc, hs, tr, ti *float64, n int, a, b, o1, o2 float64, out *[32]float64)
// The Hann window and the fundamental's sums in one pass: with
// w[m] = 0.5 + a·hc[m] + b·hs[m], v = y − o and d = w·v, it stores d in
// d1, d2 and sums, per channel, out[0:4] Σd, [4:8] Σd·v, [8:12] Σd·tr,
// [12:16] Σd·ti, and [16:32] the same for channel 2. The table is read
// as memory operands so that the five constants stay in registers.
TEXT ·hannFund2AVX2(SB), NOSPLIT, $0-112
	MOVQ         d1+0(FP), R12
	MOVQ         d2+8(FP), R13
	MOVQ         y1+16(FP), SI
	MOVQ         y2+24(FP), DI
	MOVQ         hc+32(FP), R8
	MOVQ         hs+40(FP), R9
	MOVQ         tr+48(FP), R10
	MOVQ         ti+56(FP), R11
	MOVQ         n+64(FP), CX
	VBROADCASTSD a+72(FP), Y12
	VBROADCASTSD b+80(FP), Y13
	VBROADCASTSD o1+88(FP), Y14
	VBROADCASTSD o2+96(FP), Y15
	MOVQ         out+104(FP), DX
	MOVQ         $0x3fe0000000000000, AX // 0.5
	MOVQ         AX, X11
	VBROADCASTSD X11, Y11
	VXORPD       Y0, Y0, Y0
	VXORPD       Y1, Y1, Y1
	VXORPD       Y2, Y2, Y2
	VXORPD       Y3, Y3, Y3
	VXORPD       Y4, Y4, Y4
	VXORPD       Y5, Y5, Y5
	VXORPD       Y6, Y6, Y6
	VXORPD       Y7, Y7, Y7
	XORQ         AX, AX

hann4:
	CMPQ        AX, CX
	JGE         hannout
	VMOVAPD     Y11, Y8
	VFMADD231PD (R9)(AX*8), Y13, Y8
	VFMADD231PD (R8)(AX*8), Y12, Y8
	VMOVUPD     (SI)(AX*8), Y9
	VSUBPD      Y14, Y9, Y9
	VMULPD      Y8, Y9, Y10
	VMOVUPD     Y10, (R12)(AX*8)
	VADDPD      Y10, Y0, Y0
	VFMADD231PD Y10, Y9, Y1
	VFMADD231PD (R10)(AX*8), Y10, Y2
	VFMADD231PD (R11)(AX*8), Y10, Y3
	VMOVUPD     (DI)(AX*8), Y9
	VSUBPD      Y15, Y9, Y9
	VMULPD      Y8, Y9, Y10
	VMOVUPD     Y10, (R13)(AX*8)
	VADDPD      Y10, Y4, Y4
	VFMADD231PD Y10, Y9, Y5
	VFMADD231PD (R10)(AX*8), Y10, Y6
	VFMADD231PD (R11)(AX*8), Y10, Y7
	ADDQ        $4, AX
	JMP         hann4

hannout:
	VMOVUPD    Y0, 0(DX)
	VMOVUPD    Y1, 32(DX)
	VMOVUPD    Y2, 64(DX)
	VMOVUPD    Y3, 96(DX)
	VMOVUPD    Y4, 128(DX)
	VMOVUPD    Y5, 160(DX)
	VMOVUPD    Y6, 192(DX)
	VMOVUPD    Y7, 224(DX)
	VZEROUPPER
	RET
