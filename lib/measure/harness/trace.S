/* Region markers. The firmware library, compiled with -DOFFRAMP_TRACE, calls
 *   void offramp_trace(int32_t event, int32_t index);
 * at the edges of what it wants counted (1/2 stage begin/end, 3/4 decision begin/end,
 * 5/6 frame begin/end; 7/8 are the harness's calibration region). Each call makes one store
 * into the marker block, at word (event << 9) | (index & 511); the counter plugin watches only
 * the stores made by this function and records the instruction count at each.
 *
 * Written in assembly so that its cost is fixed and known: from one marker store to the next
 * with nothing between, a caller that sets its two arguments with single instructions executes
 *   bx lr | movs r0 | movs r1 | bl | ubfx | orr | movw | movt | str  = 9 instructions,
 * which offramp_harness_calibrate measures and the reader subtracts per marker. */
        .syntax unified
        .thumb

        .section .text.offramp_trace, "ax", %progbits
        .global offramp_trace
        .type   offramp_trace, %function
        .thumb_func
offramp_trace:
        ubfx    r1, r1, #0, #9
        orr     r1, r1, r0, lsl #9
        movw    r2, #:lower16:offramp_harness_marks
        movt    r2, #:upper16:offramp_harness_marks
        str     r0, [r2, r1, lsl #2]
        bx      lr
        .size   offramp_trace, . - offramp_trace

        /* The empty region: the marker's own cost between two stores. */
        .section .text.offramp_harness_calibrate, "ax", %progbits
        .global offramp_harness_calibrate
        .type   offramp_harness_calibrate, %function
        .thumb_func
offramp_harness_calibrate:
        push    {r4, lr}
        movs    r0, #7
        movs    r1, #0
        bl      offramp_trace
        movs    r0, #8
        movs    r1, #0
        bl      offramp_trace
        pop     {r4, pc}
        .size   offramp_harness_calibrate, . - offramp_harness_calibrate
