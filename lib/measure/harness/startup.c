/* Reset and exception entry for the bare-metal harness (Armv7-M and Armv8-M mainline).
 * The vector table sits at address 0, where the three QEMU machines start the core
 * (Armv7-M ARM, the vector table: SP_main from word 0, the reset handler from word 1). Assembly, since nothing
 * may run before the FPU is on (gcc may use FP or vector registers in any C loop, and the M55's MVE
 * needs CP10 too); kept in a .c file as file-scope asm. */
__asm__(
    ".pushsection .text\n"
    "        .syntax unified\n"
    "        .thumb\n"

    "        .section .vectors, \"a\", %progbits\n"
    "        .global offramp_harness_vectors\n"
    "offramp_harness_vectors:\n"
    "        .word   __stack_top\n"
    "        .word   offramp_harness_reset\n"
    "        .rept   14\n" /* NMI .. SysTick: all faults and traps stop the run */
    "        .word   offramp_harness_fault_entry\n"
    "        .endr\n"

    "        .section .text.offramp_harness_reset, \"ax\", %progbits\n"
    "        .global offramp_harness_reset\n"
    "        .type   offramp_harness_reset, %function\n"
    "        .thumb_func\n"
    "offramp_harness_reset:\n"
    /* Full access to CP10 and CP11 (the FPU, and MVE on the M55) before any floating-point
     * instruction, since the C code may use them from its first line (CPACR in the Armv7-M ARM). */
    "        ldr     r0, =0xE000ED88\n"
    "        ldr     r1, [r0]\n"
    "        orr     r1, r1, #(0xF << 20)\n"
    "        str     r1, [r0]\n"
    "        dsb\n"
    "        isb\n"
    /* .data from its load address, then .bss zeroed. */
    "        ldr     r0, =__data_load\n"
    "        ldr     r1, =__data_start\n"
    "        ldr     r2, =__data_end\n"
    "1:      cmp     r1, r2\n"
    "        bhs     2f\n"
    "        ldr     r3, [r0], #4\n"
    "        str     r3, [r1], #4\n"
    "        b       1b\n"
    "2:      ldr     r1, =__bss_start\n"
    "        ldr     r2, =__bss_end\n"
    "        movs    r3, #0\n"
    "3:      cmp     r1, r2\n"
    "        bhs     4f\n"
    "        str     r3, [r1], #4\n"
    "        b       3b\n"
    /* Paint the stack below the current SP: the words still holding the pattern at exit are
     * the ones never used (the high-water mark, read in boot.c). */
    "4:      ldr     r1, =__stack_limit\n"
    "        mov     r2, sp\n"
    "        ldr     r3, =OFFRAMP_HARNESS_PAINT\n"
    "5:      cmp     r1, r2\n"
    "        bhs     6f\n"
    "        str     r3, [r1], #4\n"
    "        b       5b\n"
    "6:      bl      offramp_harness_start\n"
    "        b       .\n"
    "        .size   offramp_harness_reset, . - offramp_harness_reset\n"

    /* A fault, NMI or unexpected trap: report the exception number and the stacked PC. */
    "        .section .text.offramp_harness_fault_entry, \"ax\", %progbits\n"
    "        .global offramp_harness_fault_entry\n"
    "        .type   offramp_harness_fault_entry, %function\n"
    "        .thumb_func\n"
    "offramp_harness_fault_entry:\n"
    "        mrs     r0, ipsr\n"
    "        tst     lr, #4\n"
    "        ite     eq\n"
    "        mrseq   r2, msp\n"
    "        mrsne   r2, psp\n"
    "        ldr     r1, [r2, #24]\n"
    "        b       offramp_harness_fault\n"
    "        .size   offramp_harness_fault_entry, . - offramp_harness_fault_entry\n"

    "        .set    OFFRAMP_HARNESS_PAINT, 0x5AA5C33C\n"
    "        .global OFFRAMP_HARNESS_PAINT\n"
    ".popsection\n");
