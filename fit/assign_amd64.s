#include "textflag.h"

// Constants of assignAVX2: the lane numbers 0..3, the step 4 between
// groups of centres, and +Inf.
DATA lanes<>+0(SB)/8, $0
DATA lanes<>+8(SB)/8, $1
DATA lanes<>+16(SB)/8, $2
DATA lanes<>+24(SB)/8, $3
GLOBL lanes<>(SB), RODATA|NOPTR, $32

DATA fours<>+0(SB)/8, $4
DATA fours<>+8(SB)/8, $4
DATA fours<>+16(SB)/8, $4
DATA fours<>+24(SB)/8, $4
GLOBL fours<>(SB), RODATA|NOPTR, $32

DATA posinf<>+0(SB)/8, $0x7ff0000000000000
GLOBL posinf<>(SB), RODATA|NOPTR, $8

// func cpuid(eaxArg, ecxArg uint32) (eax, ebx, ecx, edx uint32)
TEXT ·cpuid(SB), NOSPLIT, $0-24
	MOVL eaxArg+0(FP), AX
	MOVL ecxArg+4(FP), CX
	CPUID
	MOVL AX, eax+8(FP)
	MOVL BX, ebx+12(FP)
	MOVL CX, ecx+16(FP)
	MOVL DX, edx+20(FP)
	RET

// func xgetbv() (eax, edx uint32)
TEXT ·xgetbv(SB), NOSPLIT, $0-8
	MOVL $0, CX
	BYTE $0x0f; BYTE $0x01; BYTE $0xd0 // XGETBV
	MOVL AX, eax+0(FP)
	MOVL DX, edx+4(FP)
	RET

// REDUCE turns one row's four lane minima (YB, its X half XB) and their
// centre indexes (YI, XI) into the row's result: the lowest distance, the
// lowest index among equal distances, stored at DOFF(SI) and the index at
// LOFF(DI). It compares lanes 2, 3 with 0, 1 and then lane 1 with lane 0,
// without branches. It clobbers X0, X1, X13, X14, X15 and DX.
#define REDUCE(YB, XB, YI, XI, DOFF, LOFF) \
	VEXTRACTF128 $1, YB, X13 \
	VEXTRACTI128 $1, YI, X14 \
	VCMPPD $0x11, XB, X13, X15 \
	VCMPPD $0x00, XB, X13, X0 \
	VPCMPGTQ X14, XI, X1 \
	VPAND X1, X0, X0 \
	VPOR X0, X15, X15 \
	VBLENDVPD X15, X13, XB, XB \
	VBLENDVPD X15, X14, XI, XI \
	VPERMILPD $1, XB, X13 \
	VPSHUFD $0x4E, XI, X14 \
	VCMPPD $0x11, XB, X13, X15 \
	VCMPPD $0x00, XB, X13, X0 \
	VPCMPGTQ X14, XI, X1 \
	VPAND X1, X0, X0 \
	VPOR X0, X15, X15 \
	VBLENDVPD X15, X13, XB, XB \
	VBLENDVPD X15, X14, XI, XI \
	VMOVSD XB, DOFF(SI) \
	VMOVQ XI, DX \
	MOVL DX, LOFF(DI)

// STEP adds one feature of one row to its accumulator ACC: the row's
// value at ADDR broadcast, minus the four centres in Y13, squared and
// added (three rounded operations, as sqDist).
#define STEP(ADDR, ACC) \
	VBROADCASTSD ADDR, Y14 \
	VSUBPD Y13, Y14, Y14 \
	VMULPD Y14, Y14, Y14 \
	VADDPD Y14, ACC, ACC

// TAKE keeps, lane by lane, the group's distance ACC where it is strictly
// below the lane minimum BEST (false for NaN), with the group's indexes.
#define TAKE(ACC, BEST, IDX) \
	VCMPPD $0x11, BEST, ACC, Y14 \
	VBLENDVPD Y14, ACC, BEST, BEST \
	VBLENDVPD Y14, Y12, IDX, IDX

// func assignAVX2(label *int32, dist2 *float64, n int, rows *float64, d int, ct *float64, groups int)
//
// For n rows (n a multiple of 4; d features each, row-major at rows) it
// finds the nearest of the centres laid out by assignRowsVector in groups
// of four, feature by feature: ct[(g·d + f)·4 + lane]. Four rows are
// measured at once against one group, each on its own accumulator, one
// centre per lane; each distance is summed over the features in order,
// x − c, then a rounded product, then a rounded sum (no fused
// multiply-add), as sqDist sums it. Each lane keeps its first strict
// minimum (less-than, false for NaN) and the centre's index; REDUCE then
// picks the lowest distance over the lanes, the lowest index on equal
// distances, which is the first strict minimum in index order. A row whose
// every distance is +Inf or NaN gets +Inf and label 0, for the caller to
// settle.
//
// Registers: DI label, SI dist2, CX blocks of 4 rows left, R8 first row of
// the block, R9 d, R10 ct, R11 groups, R12 centre pointer, R13 groups
// left, R14 feature pointer, BX row stride (8d bytes), AX 3·BX, DX
// features left; Y0–Y3 the rows' accumulators, Y4–Y7 their lane minima,
// Y8–Y11 the minima's indexes, Y12 the group's indexes, Y13 the group's
// feature, Y14 scratch.
TEXT ·assignAVX2(SB), NOSPLIT, $0-56
	MOVQ label+0(FP), DI
	MOVQ dist2+8(FP), SI
	MOVQ n+16(FP), CX
	MOVQ rows+24(FP), R8
	MOVQ d+32(FP), R9
	MOVQ ct+40(FP), R10
	MOVQ groups+48(FP), R11
	MOVQ R9, BX
	SHLQ $3, BX
	LEAQ (BX)(BX*2), AX
	SHRQ $2, CX
	JZ done

block:
	VBROADCASTSD posinf<>(SB), Y4
	VMOVAPD Y4, Y5
	VMOVAPD Y4, Y6
	VMOVAPD Y4, Y7
	VPXOR Y8, Y8, Y8
	VPXOR Y9, Y9, Y9
	VPXOR Y10, Y10, Y10
	VPXOR Y11, Y11, Y11
	VMOVDQU lanes<>(SB), Y12
	MOVQ R10, R12
	MOVQ R11, R13

group:
	VXORPD Y0, Y0, Y0
	VXORPD Y1, Y1, Y1
	VXORPD Y2, Y2, Y2
	VXORPD Y3, Y3, Y3
	MOVQ R8, R14
	MOVQ R9, DX

feat:
	VMOVUPD (R12), Y13
	STEP((R14), Y0)
	STEP((R14)(BX*1), Y1)
	STEP((R14)(BX*2), Y2)
	STEP((R14)(AX*1), Y3)
	ADDQ $8, R14
	ADDQ $32, R12
	DECQ DX
	JNZ feat

	TAKE(Y0, Y4, Y8)
	TAKE(Y1, Y5, Y9)
	TAKE(Y2, Y6, Y10)
	TAKE(Y3, Y7, Y11)
	VPADDQ fours<>(SB), Y12, Y12
	DECQ R13
	JNZ group

	REDUCE(Y4, X4, Y8, X8, 0, 0)
	REDUCE(Y5, X5, Y9, X9, 8, 4)
	REDUCE(Y6, X6, Y10, X10, 16, 8)
	REDUCE(Y7, X7, Y11, X11, 24, 12)
	ADDQ $32, SI
	ADDQ $16, DI
	LEAQ (R8)(BX*4), R8
	DECQ CX
	JNZ block

done:
	VZEROUPPER
	RET

// TAKE2 is TAKE that also keeps, lane by lane, the second-lowest
// distance in the 32 bytes at SOFF(SP): second ← min(second, max(best,
// acc)) with the lane minimum before the update, which is the old minimum
// when the group's distance beats it and the group's distance when it
// does not. VMAXPD and VMINPD return their second source when either is
// NaN, so a NaN distance leaves second as it was.
#define TAKE2(ACC, BEST, IDX, SOFF) \
	VMAXPD ACC, BEST, Y14 \
	VMINPD SOFF(SP), Y14, Y14 \
	VMOVUPD Y14, SOFF(SP) \
	TAKE(ACC, BEST, IDX)

// SECOND stores at OOFF(DX) one row's second-lowest distance over all
// centres: the lower of the second-lowest of the four lane minima (YB,
// XB) and the lowest of the lanes' second-lowest distances (at SOFF(SP)).
// It clobbers X0, X1, X13, X14, X15.
#define SECOND(YB, XB, SOFF, OOFF) \
	VEXTRACTF128 $1, YB, X13 \
	VMINPD X13, XB, X14 \
	VMAXPD X13, XB, X15 \
	VPERMILPD $1, X14, X0 \
	VMAXPD X0, X14, X0 \
	VPERMILPD $1, X15, X1 \
	VMINPD X1, X15, X1 \
	VMINPD X1, X0, X0 \
	VMOVUPD SOFF(SP), Y13 \
	VEXTRACTF128 $1, Y13, X14 \
	VMINPD X14, X13, X13 \
	VPERMILPD $1, X13, X14 \
	VMINPD X14, X13, X13 \
	VMINPD X13, X0, X0 \
	VMOVSD X0, OOFF(DX)

// func nearestTwoAVX2(label *int32, dist2 *float64, second *float64, n int, rows *float64, d int, ct *float64, groups int)
//
// assignAVX2 that also stores each row's second-lowest distance over all
// centres (NaN left out) at second. The lanes' second-lowest distances
// live in the frame, 32 bytes per row of the block at 0(SP) … 96(SP); the
// second pointer at 128(SP).
TEXT ·nearestTwoAVX2(SB), NOSPLIT, $136-64
	MOVQ label+0(FP), DI
	MOVQ dist2+8(FP), SI
	MOVQ second+16(FP), DX
	MOVQ DX, 128(SP)
	MOVQ n+24(FP), CX
	MOVQ rows+32(FP), R8
	MOVQ d+40(FP), R9
	MOVQ ct+48(FP), R10
	MOVQ groups+56(FP), R11
	MOVQ R9, BX
	SHLQ $3, BX
	LEAQ (BX)(BX*2), AX
	SHRQ $2, CX
	JZ done2

block2:
	VBROADCASTSD posinf<>(SB), Y4
	VMOVAPD Y4, Y5
	VMOVAPD Y4, Y6
	VMOVAPD Y4, Y7
	VMOVUPD Y4, 0(SP)
	VMOVUPD Y4, 32(SP)
	VMOVUPD Y4, 64(SP)
	VMOVUPD Y4, 96(SP)
	VPXOR Y8, Y8, Y8
	VPXOR Y9, Y9, Y9
	VPXOR Y10, Y10, Y10
	VPXOR Y11, Y11, Y11
	VMOVDQU lanes<>(SB), Y12
	MOVQ R10, R12
	MOVQ R11, R13

group2:
	VXORPD Y0, Y0, Y0
	VXORPD Y1, Y1, Y1
	VXORPD Y2, Y2, Y2
	VXORPD Y3, Y3, Y3
	MOVQ R8, R14
	MOVQ R9, DX

feat2:
	VMOVUPD (R12), Y13
	STEP((R14), Y0)
	STEP((R14)(BX*1), Y1)
	STEP((R14)(BX*2), Y2)
	STEP((R14)(AX*1), Y3)
	ADDQ $8, R14
	ADDQ $32, R12
	DECQ DX
	JNZ feat2

	TAKE2(Y0, Y4, Y8, 0)
	TAKE2(Y1, Y5, Y9, 32)
	TAKE2(Y2, Y6, Y10, 64)
	TAKE2(Y3, Y7, Y11, 96)
	VPADDQ fours<>(SB), Y12, Y12
	DECQ R13
	JNZ group2

	MOVQ 128(SP), DX
	SECOND(Y4, X4, 0, 0)
	SECOND(Y5, X5, 32, 8)
	SECOND(Y6, X6, 64, 16)
	SECOND(Y7, X7, 96, 24)
	ADDQ $32, 128(SP)
	REDUCE(Y4, X4, Y8, X8, 0, 0)
	REDUCE(Y5, X5, Y9, X9, 8, 4)
	REDUCE(Y6, X6, Y10, X10, 16, 8)
	REDUCE(Y7, X7, Y11, X11, 24, 12)
	ADDQ $32, SI
	ADDQ $16, DI
	LEAQ (R8)(BX*4), R8
	DECQ CX
	JNZ block2

done2:
	VZEROUPPER
	RET
