/* Reset and exception entry for the bare-metal harness (Armv7-M and Armv8-M mainline).
 * The vector table sits at address 0, where the three QEMU machines start the core
 * (Armv7-M ARM B1.5.3: SP_main from word 0, the reset handler from word 1). */
        .syntax unified
        .thumb

        .section .vectors, "a", %progbits
        .global offramp_harness_vectors
offramp_harness_vectors:
        .word   __stack_top
        .word   offramp_harness_reset
        .rept   14                      /* NMI .. SysTick: all faults and traps stop the run */
        .word   offramp_harness_fault_entry
        .endr

        .section .text.offramp_harness_reset, "ax", %progbits
        .global offramp_harness_reset
        .type   offramp_harness_reset, %function
        .thumb_func
offramp_harness_reset:
        /* Full access to CP10 and CP11 (the FPU, and MVE on the M55) before any floating-point
         * instruction, since the C code may use them from its first line (CPACR, Armv7-M ARM B3.2.20). */
        ldr     r0, =0xE000ED88
        ldr     r1, [r0]
        orr     r1, r1, #(0xF << 20)
        str     r1, [r0]
        dsb
        isb
        /* .data from its load address, then .bss zeroed. */
        ldr     r0, =__data_load
        ldr     r1, =__data_start
        ldr     r2, =__data_end
1:      cmp     r1, r2
        bhs     2f
        ldr     r3, [r0], #4
        str     r3, [r1], #4
        b       1b
2:      ldr     r1, =__bss_start
        ldr     r2, =__bss_end
        movs    r3, #0
3:      cmp     r1, r2
        bhs     4f
        str     r3, [r1], #4
        b       3b
        /* Paint the stack below the current SP: the words still holding the pattern at exit are
         * the ones never used (the high-water mark, read in boot.c). */
4:      ldr     r1, =__stack_limit
        mov     r2, sp
        ldr     r3, =OFFRAMP_HARNESS_PAINT
5:      cmp     r1, r2
        bhs     6f
        str     r3, [r1], #4
        b       5b
6:      bl      offramp_harness_start
        b       .
        .size   offramp_harness_reset, . - offramp_harness_reset

        /* A fault, NMI or unexpected trap: report the exception number and the stacked PC. */
        .section .text.offramp_harness_fault_entry, "ax", %progbits
        .global offramp_harness_fault_entry
        .type   offramp_harness_fault_entry, %function
        .thumb_func
offramp_harness_fault_entry:
        mrs     r0, ipsr
        tst     lr, #4
        ite     eq
        mrseq   r2, msp
        mrsne   r2, psp
        ldr     r1, [r2, #24]
        b       offramp_harness_fault
        .size   offramp_harness_fault_entry, . - offramp_harness_fault_entry

        .set    OFFRAMP_HARNESS_PAINT, 0x5AA5C33C
        .global OFFRAMP_HARNESS_PAINT
