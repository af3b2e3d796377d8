/* Region markers. The firmware library, compiled with -DOFFRAMP_TRACE, calls
 *   void offramp_trace(int32_t event, int32_t index);
 * at the edges of what it wants counted (1/2 stage begin/end, 3/4 decision begin/end,
 * 5/6 frame begin/end; 7/8 are the harness's calibration region). Each call makes one store
 * into the marker block, at word (event << 16) | (index & 0xffff); the counter plugin watches only
 * the stores made by this function and records the instruction count at each.
 *
 * Written in assembly so that its cost is fixed and known: from one marker store to the next
 * with nothing between, a caller that sets its two arguments with single instructions executes
 *   bx lr | movs r0 | movs r1 | bl | ubfx | orr | movw | movt | str  = 9 instructions,
 * which offramp_harness_calibrate measures and the reader subtracts per marker. File-scope asm in
 * a .c file, so the sequence is fixed whatever the compiler does. */
__asm__(
    ".pushsection .text\n"
    "        .syntax unified\n"
    "        .thumb\n"

    "        .section .text.offramp_trace, \"ax\", %progbits\n"
    "        .global offramp_trace\n"
    "        .type   offramp_trace, %function\n"
    "        .thumb_func\n"
    "offramp_trace:\n"
    "        ubfx    r1, r1, #0, #16\n"
    "        orr     r1, r1, r0, lsl #16\n"
    "        movw    r2, #:lower16:offramp_harness_marks\n"
    "        movt    r2, #:upper16:offramp_harness_marks\n"
    "        str     r0, [r2, r1, lsl #2]\n"
    "        bx      lr\n"
    "        .size   offramp_trace, . - offramp_trace\n"

    /* The empty region: the marker's own cost between two stores. */
    "        .section .text.offramp_harness_calibrate, \"ax\", %progbits\n"
    "        .global offramp_harness_calibrate\n"
    "        .type   offramp_harness_calibrate, %function\n"
    "        .thumb_func\n"
    "offramp_harness_calibrate:\n"
    "        push    {r4, lr}\n"
    "        movs    r0, #7\n"
    "        movs    r1, #0\n"
    "        bl      offramp_trace\n"
    "        movs    r0, #8\n"
    "        movs    r1, #0\n"
    "        bl      offramp_trace\n"
    "        pop     {r4, pc}\n"
    "        .size   offramp_harness_calibrate, . - offramp_harness_calibrate\n"
    ".popsection\n");
