"""The STM32F4 port (firmware/stm32f4) cross-compiles and fits the chip it names.

The build is the port's own Makefile, run into a temporary directory. The checks are against
published facts, not against the port's linker script:
  - STM32F401CC: 256 KiB of flash at 0x0800 0000 and 64 KiB of SRAM at 0x2000 0000
    (STMicroelectronics, datasheet DS9716 "STM32F401xB STM32F401xC", Table 2; reference manual
    RM0368, section 2.3, Table 1);
  - the Cortex-M vector table: word 0 is the initial stack pointer, word 1 the reset handler's
    address with bit 0 set for Thumb (Arm, "ARMv7-M Architecture Reference Manual", ARM DDI
    0403E, section B1.5.3);
  - hard-float calling convention recorded as Tag_ABI_VFP_args (Arm, "Addenda to, and Errata in,
    the ABI for the Arm Architecture", IHI 0045, section 2.5);
  - a heap-free build has no malloc, free or sbrk linked (common practice, no source).
"""

import shutil
import struct
import subprocess
from pathlib import Path

import pytest

PORT = Path(__file__).resolve().parent.parent / "firmware" / "stm32f4"
FLASH_START, FLASH_BYTES = 0x0800_0000, 256 * 1024
RAM_START, RAM_BYTES = 0x2000_0000, 64 * 1024
HEAP_SYMBOLS = {"malloc", "free", "calloc", "realloc", "_malloc_r", "_free_r", "sbrk", "_sbrk"}

if shutil.which("arm-none-eabi-gcc") is None:
    pytest.skip("arm-none-eabi-gcc is not installed", allow_module_level=True)


def _tool(name: str, *args: str) -> str:
    """Run a binutils program, failing the test with its stderr when it fails."""
    result = subprocess.run([f"arm-none-eabi-{name}", *args], capture_output=True, text=True,
                            check=False)
    if result.returncode != 0:
        pytest.fail(f"arm-none-eabi-{name} {' '.join(args)} failed:\n{result.stderr}")
    return result.stdout


@pytest.fixture(scope="module")
def elf(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The port built by its Makefile, outside the source tree."""
    out = tmp_path_factory.mktemp("stm32f4")
    result = subprocess.run(["make", "-C", str(PORT), f"BUILD={out}"], capture_output=True,
                            text=True, check=False)
    if result.returncode != 0:
        pytest.fail(f"make in firmware/stm32f4 failed:\n{result.stdout[-3000:]}{result.stderr}")
    return out / "poise-stm32f4.elf"


def _sizes(elf: Path) -> tuple[int, int, int]:
    """text, data, bss as arm-none-eabi-size (Berkeley format) reports them."""
    text, data, bss = _tool("size", "-B", str(elf)).splitlines()[1].split()[:3]
    return int(text), int(data), int(bss)


def _symbols(elf: Path) -> dict[str, int]:
    """Every symbol nm lists, defined or not, with its address (0 when undefined)."""
    symbols = {}
    for line in _tool("nm", str(elf)).splitlines():
        words = line.split()
        symbols[words[-1]] = int(words[0], 16) if len(words) == 3 else 0
    return symbols


def test_fits_the_f401cc_flash_and_ram(elf: Path) -> None:
    text, data, bss = _sizes(elf)
    assert 0 < text + data <= FLASH_BYTES
    assert data + bss <= RAM_BYTES


def test_the_vector_table_starts_flash_with_stack_and_reset_handler(elf: Path) -> None:
    image = elf.with_suffix(".bin").read_bytes()
    initial_sp, reset_vector = struct.unpack_from("<II", image, 0)
    assert initial_sp == RAM_START + RAM_BYTES
    assert reset_vector & 1, "the reset vector must have the Thumb bit set"
    assert FLASH_START <= reset_vector & ~1 < FLASH_START + FLASH_BYTES
    assert reset_vector & ~1 == _symbols(elf)["reset_handler"]
    entry = _tool("readelf", "-h", str(elf)).split("Entry point address:")[1].split()[0]
    assert int(entry, 16) == reset_vector


def test_nothing_allocates(elf: Path) -> None:
    assert HEAP_SYMBOLS.isdisjoint(_symbols(elf))


def test_built_for_the_hard_float_abi(elf: Path) -> None:
    attributes = _tool("readelf", "-A", str(elf))
    assert "Tag_ABI_VFP_args: VFP registers" in attributes
    assert "Tag_CPU_arch: v7E-M" in attributes
