//go:build amd64 && !purego

#include "textflag.h"

// AVX2+FMA kernels of the record generator's common blocks, four samples
// (one YMM register of float64) a step, 1024 samples a call. Go
// assembler operand order: VFMADD231PD a, b, acc is acc += a·b;
// VFNMADD231PD a, b, acc is acc −= a·b.

// Offsets of phasorTables' arrays ([1024]float64 each).
#define TONEC 0
#define TONES 8192
#define RIPC 16384
#define RIPS 24576
#define DECC 32768
#define DECS 40960

// func fillSmallAVX2(xb, yb *[1024]float64, t *phasorTables, c *[10]float64)
// u = yr·C − yi·S + er·DC − ei·DS; y = u + u²·(sq − u·k3) + rr·RS + ri·RC;
// x = y + vr·C − vi·S.
TEXT ·fillSmallAVX2(SB), NOSPLIT, $0-32
	MOVQ         xb+0(FP), DI
	MOVQ         yb+8(FP), SI
	MOVQ         t+16(FP), DX
	MOVQ         c+24(FP), CX
	VBROADCASTSD 0(CX), Y8   // yr
	VBROADCASTSD 8(CX), Y9   // yi
	VBROADCASTSD 16(CX), Y10 // vr
	VBROADCASTSD 24(CX), Y11 // vi
	VBROADCASTSD 32(CX), Y12 // rr
	VBROADCASTSD 40(CX), Y13 // ri
	VBROADCASTSD 48(CX), Y14 // sq
	VBROADCASTSD 56(CX), Y15 // k3
	VBROADCASTSD 64(CX), Y7  // er
	XORQ         AX, AX

fill4:
	VMOVUPD      TONEC(DX)(AX*8), Y0 // C
	VMOVUPD      TONES(DX)(AX*8), Y1 // S
	VMULPD       Y8, Y0, Y2          // u = yr·C
	VFNMADD231PD Y9, Y1, Y2          // u −= yi·S
	VMOVUPD      DECC(DX)(AX*8), Y5
	VFMADD231PD  Y7, Y5, Y2          // u += er·DC
	VMOVUPD      DECS(DX)(AX*8), Y6
	VBROADCASTSD 72(CX), Y3          // ei
	VFNMADD231PD Y3, Y6, Y2          // u −= ei·DS
	VMOVAPD      Y14, Y3
	VFNMADD231PD Y15, Y2, Y3         // t = sq − u·k3
	VMULPD       Y2, Y2, Y4          // u²
	VFMADD231PD  Y4, Y3, Y2          // y = u + u²·t
	VMOVUPD      RIPS(DX)(AX*8), Y5
	VFMADD231PD  Y12, Y5, Y2         // y += rr·RS
	VMOVUPD      RIPC(DX)(AX*8), Y6
	VFMADD231PD  Y13, Y6, Y2         // y += ri·RC
	VMOVUPD      Y2, (SI)(AX*8)
	VFMADD231PD  Y10, Y0, Y2         // x = y + vr·C
	VFNMADD231PD Y11, Y1, Y2         // x −= vi·S
	VMOVUPD      Y2, (DI)(AX*8)
	ADDQ         $4, AX
	CMPQ         AX, $1024
	JLT          fill4
	VZEROUPPER
	RET

// 65536 as int32 lanes, and the low-16-bit mask.
DATA q65536<>+0(SB)/4, $65536
GLOBL q65536<>(SB), RODATA|NOPTR, $4
DATA qmask<>+0(SB)/4, $0xffff
GLOBL qmask<>(SB), RODATA|NOPTR, $4

// func quantiseEncodeAVX2(out *[1024]int16, body *[4096]byte, tab *real32Codes, v *[1024]float64, nz *[1024]float32, c *[5]float64)
// q = trunc(min(max(base + v·inv + nz·sn, lo), hi)) − 65536; out[k] = q;
// body[4k:] = tab[uint16(q)].
TEXT ·quantiseEncodeAVX2(SB), NOSPLIT, $0-48
	MOVQ         out+0(FP), DI
	MOVQ         body+8(FP), SI
	MOVQ         tab+16(FP), DX
	MOVQ         v+24(FP), R8
	MOVQ         nz+32(FP), R9
	MOVQ         c+40(FP), CX
	VBROADCASTSD 0(CX), Y8  // base
	VBROADCASTSD 8(CX), Y9  // inv
	VBROADCASTSD 16(CX), Y10 // sn
	VBROADCASTSD 24(CX), Y13 // lo
	VBROADCASTSD 32(CX), Y14 // hi
	VPBROADCASTD q65536<>(SB), X11
	VPBROADCASTD qmask<>(SB), X12
	XORQ         AX, AX

quant4:
	VCVTPS2PD    (R9)(AX*4), Y1  // noise
	VMOVAPD      Y8, Y2
	VFMADD231PD  (R8)(AX*8), Y9, Y2 // base + v·inv
	VFMADD231PD  Y1, Y10, Y2         // + nz·sn
	VMAXPD       Y13, Y2, Y2         // clip
	VMINPD       Y14, Y2, Y2
	VCVTTPD2DQY  Y2, X3              // truncate
	VPSUBD       X11, X3, X3         // q
	VPACKSSDW    X3, X3, X4
	MOVQ         X4, (DI)(AX*2)      // four int16 codes
	VPAND        X12, X3, X5         // uint16(q)
	VPCMPEQD     X6, X6, X6          // gather mask: all lanes
	VPGATHERDD   X6, (DX)(X5*4), X7
	VMOVDQU      X7, (SI)(AX*4)
	ADDQ         $4, AX
	CMPQ         AX, $1024
	JLT          quant4
	VZEROUPPER
	RET
