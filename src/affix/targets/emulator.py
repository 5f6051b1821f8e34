"""Run a function of a bare ELF image instruction by instruction (the unicorn engine).

unicorn executes Thumb-2 on its Cortex-M CPU models (and x86-64 for the host)
one instruction at a time; a code hook counts what one call executes.  The
image comes from :func:`affix.targets.toolchain.build_image`: no start-up
code, so each call starts from a fresh stack and returns to a stop address.
"""
from __future__ import annotations

from affix.errors import ToolError
from affix.targets.toolchain import elf_reader

PAGE = 0x1000
RETURN = 0x0F000000  # where every call returns: a mapped page no image uses
SCRATCH = 0x20000000  # arguments (vectors in, outputs out)
SCRATCH_SIZE = 0x10000
STACK_TOP = 0x20100000
STACK_SIZE = 0x10000
_FILL = 0xA5  # stack paint: the lowest byte that changed is the call's deepest stack use
PAINTED = 0x4000  # the stack's top bytes painted before a counted call


def engine():
    """The unicorn module, or ToolError naming the package to install."""
    try:
        import unicorn
    except ImportError:
        raise ToolError("unicorn is not installed (pip install 'affix[verify]')") from None
    return unicorn


class Emulator:
    """One loaded image on one emulated core; ``call`` runs a function with integer arguments."""

    def __init__(self, elf, cpu: str):
        unicorn = engine()
        ELFFile = elf_reader()
        self._unicorn = unicorn
        self.cpu = cpu
        self.arm = cpu != "x86-64"
        if self.arm:
            from unicorn import arm_const

            uc = unicorn.Uc(unicorn.UC_ARCH_ARM, unicorn.UC_MODE_THUMB | unicorn.UC_MODE_MCLASS)
            uc.ctl_set_cpu_model(getattr(arm_const, "UC_CPU_ARM_" + cpu.upper().replace("-", "_")))
        else:
            uc = unicorn.Uc(unicorn.UC_ARCH_X86, unicorn.UC_MODE_64)
        self.uc = uc
        self.symbols = {}
        with open(elf, "rb") as handle:
            image = ELFFile(handle)
            for segment in image.iter_segments():
                if segment["p_type"] == "PT_LOAD" and segment["p_memsz"]:
                    start = segment["p_vaddr"] & ~(PAGE - 1)
                    end = -(-(segment["p_vaddr"] + segment["p_memsz"]) // PAGE) * PAGE
                    uc.mem_map(start, end - start)
                    uc.mem_write(segment["p_vaddr"], segment.data())
            table = image.get_section_by_name(".symtab")
            for symbol in table.iter_symbols() if table else ():
                if symbol["st_info"]["type"] == "STT_FUNC":
                    self.symbols[symbol.name] = (symbol["st_value"] & ~1, symbol["st_size"])
        uc.mem_map(RETURN, PAGE)
        uc.mem_map(SCRATCH, SCRATCH_SIZE)
        uc.mem_map(STACK_TOP - STACK_SIZE, STACK_SIZE)
        self._count = 0
        self._hook = None

    def write(self, address: int, data: bytes) -> None:
        self.uc.mem_write(address, bytes(data))

    def read(self, address: int, size: int) -> bytes:
        return bytes(self.uc.mem_read(address, size))

    def call(self, function: str, *args: int, count: bool = False) -> tuple[int, int]:
        """Run ``function(*args)`` to its return; with ``count``, (instructions executed, deepest stack
        use in bytes), else (0, 0)."""
        if function not in self.symbols:
            raise ToolError(f"{function} is not in the image")
        entry = self.symbols[function][0]
        if count:
            self.uc.mem_write(STACK_TOP - PAINTED, bytes([_FILL]) * PAINTED)
        if self.arm:
            from unicorn import arm_const as c

            for register, value in zip((c.UC_ARM_REG_R0, c.UC_ARM_REG_R1, c.UC_ARM_REG_R2, c.UC_ARM_REG_R3), args):
                self.uc.reg_write(register, value)
            self.uc.reg_write(c.UC_ARM_REG_SP, STACK_TOP)
            self.uc.reg_write(c.UC_ARM_REG_LR, RETURN | 1)
            begin = entry | 1
        else:
            from unicorn import x86_const as c

            for register, value in zip((c.UC_X86_REG_RDI, c.UC_X86_REG_RSI, c.UC_X86_REG_RDX, c.UC_X86_REG_RCX), args):
                self.uc.reg_write(register, value)
            self.uc.mem_write(STACK_TOP - 8, RETURN.to_bytes(8, "little"))
            self.uc.reg_write(c.UC_X86_REG_RSP, STACK_TOP - 8)
            begin = entry
        self._count = 0
        if count and self._hook is None:
            self._hook = self.uc.hook_add(self._unicorn.UC_HOOK_CODE, self._tick)
            # Unicorn 2 (up to 2.1) does not instrument code it translated before the hook existed
            # (unicorn-engine/unicorn#2200): drop those translations, so every instruction counts.
            self.uc.ctl_flush_tb()
        elif not count and self._hook is not None:
            self.uc.hook_del(self._hook)
            self._hook = None
            self.uc.ctl_flush_tb()
        try:
            self.uc.emu_start(begin, RETURN, count=10**8)
        except self._unicorn.UcError as exc:
            raise ToolError(f"{function} faulted on the emulated {self.cpu}: {exc}") from None
        pc = self.uc.reg_read(c.UC_ARM_REG_PC if self.arm else c.UC_X86_REG_RIP)
        if pc & ~1 != RETURN:
            raise ToolError(f"{function} did not return on the emulated {self.cpu} (stopped at {pc:#x})")
        if not count:
            return 0, 0
        stack = self.read(STACK_TOP - PAINTED, PAINTED)
        used = PAINTED - next((k for k, b in enumerate(stack) if b != _FILL), PAINTED)
        if used == PAINTED:
            raise ToolError(f"{function} used more than {PAINTED} bytes of stack on the emulated {self.cpu}")
        if not self.arm:
            used -= 8  # the return address the caller pushed
        return self._count, used

    def result(self, *, signed: bool = False) -> int:
        """What the last call returned in its int-sized register (r0; eax on x86-64)."""
        if self.arm:
            from unicorn import arm_const as c

            value = self.uc.reg_read(c.UC_ARM_REG_R0) & 0xFFFFFFFF
        else:
            from unicorn import x86_const as c

            value = self.uc.reg_read(c.UC_X86_REG_EAX) & 0xFFFFFFFF
        return value - (1 << 32) if signed and value >= 1 << 31 else value

    def _tick(self, uc, address, size, data):
        self._count += 1

