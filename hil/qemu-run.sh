#!/usr/bin/env bash
# Run a firmware ELF under QEMU with semihosting, deterministic instruction counting and a
# timeout; the cargo runner of this workspace, and what check.sh calls.
#
#   qemu-run.sh ELF [RUN_DIR]
#
# RUN_DIR (default: the current directory) becomes QEMU's working directory, where the
# firmware's semihosting files live. Arguments are never passed to QEMU after -kernel (QEMU would
# take them for a disk image). The exit code is the firmware's, or 124 on timeout.
set -euo pipefail
elf="$(realpath "$1")"
dir="${2:-.}"
timeout_s="${HIL_QEMU_TIMEOUT:-120}"
# e_machine at byte 18 of the ELF header: 0x28 = Arm, 0xf3 = RISC-V.
machine="$(od -An -tx1 -j18 -N1 "$elf" | tr -d ' ')"
common=(-display none -monitor none -serial none
        -semihosting-config enable=on,target=native
        -icount shift=0 -kernel "$elf")
case "$machine" in
  28) cmd=(qemu-system-arm -machine mps2-an386 -cpu cortex-m4 "${common[@]}") ;;
  f3) cmd=(qemu-system-riscv32 -machine virt -bios none "${common[@]}") ;;
  *) echo "qemu-run.sh: $elf is neither an Arm nor a RISC-V ELF (e_machine 0x$machine)" >&2
     exit 2 ;;
esac
cd "$dir"
exec timeout "$timeout_s" "${cmd[@]}"
