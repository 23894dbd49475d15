//! Memory footprint of a firmware image, read from its ELF section headers.
//!
//! Only allocated sections (`SHF_ALLOC`) take memory on the board. A section without file
//! contents (`SHT_NOBITS`: `.bss`, `.uninit`) takes RAM only; a writable section with contents
//! (`.data`) takes RAM and also flash for its initial values, which the start-up code copies;
//! every other allocated section (vector table, `.text`, `.rodata`) takes flash only. The
//! thread stack is the RAM region [`STACK_SECTION`] that the boards' linker script reserves
//! below the statics: counted apart from the static RAM; the firmware measures its peak use
//! at run time (`tw:stack`).

use std::path::Path;

use object::elf::{SHF_ALLOC, SHF_EXECINSTR, SHF_WRITE, SHT_NOBITS};
use object::{Object, ObjectSection, SectionFlags};

use super::OnchipError;

/// The section that reserves the boards' thread stack (`boards/common/board-build.rs`).
pub const STACK_SECTION: &str = ".thread_stack";

/// Where an allocated section lives.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SectionClass {
    /// Executable code, in flash (`.text`).
    Code,
    /// Constant data, in flash (`.vector_table`, `.rodata`).
    ReadOnly,
    /// Initialised variables: in RAM, with their initial values in flash (`.data`).
    Data,
    /// Zeroed or uninitialised variables, in RAM only (`.bss`, `.uninit`).
    Zeroed,
    /// RAM reserved for the thread stack ([`STACK_SECTION`]): neither flash nor statics.
    Stack,
}

impl SectionClass {
    /// Bytes of flash a section of this class and `size` takes.
    pub fn flash(self, size: u64) -> u64 {
        match self {
            SectionClass::Code | SectionClass::ReadOnly | SectionClass::Data => size,
            SectionClass::Zeroed | SectionClass::Stack => 0,
        }
    }

    /// Bytes of RAM a section of this class and `size` takes.
    pub fn ram(self, size: u64) -> u64 {
        match self {
            SectionClass::Data | SectionClass::Zeroed => size,
            SectionClass::Code | SectionClass::ReadOnly | SectionClass::Stack => 0,
        }
    }
}

/// One allocated section.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Section {
    /// Section name (`.text`, ...).
    pub name: String,
    /// Run-time address.
    pub address: u64,
    /// Size in bytes.
    pub size: u64,
    /// Where it lives.
    pub class: SectionClass,
}

/// Flash and static RAM of one image.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Footprint {
    /// Executable code.
    pub code_bytes: u64,
    /// Constant data (vector table included).
    pub rodata_bytes: u64,
    /// Initialised variables.
    pub data_bytes: u64,
    /// Zeroed and uninitialised variables.
    pub zeroed_bytes: u64,
    /// Load image: code + constants + initial values of `.data`.
    pub flash_bytes: u64,
    /// Static RAM: `.data` + zeroed sections (stack not included).
    pub ram_bytes: u64,
    /// RAM reserved for the thread stack (0 for an image without [`STACK_SECTION`]).
    pub stack_bytes: u64,
    /// Every non-empty allocated section, in header order.
    pub sections: Vec<Section>,
}

impl Footprint {
    /// The section called `name`.
    pub fn section(&self, name: &str) -> Option<&Section> {
        self.sections.iter().find(|s| s.name == name)
    }

    /// Classifies and sums the allocated sections of an ELF image held in memory;
    /// `path` only names it in errors.
    pub fn from_elf_bytes(path: &Path, bytes: &[u8]) -> Result<Footprint, OnchipError> {
        let elf_error = |message: String| OnchipError::Elf {
            path: path.to_path_buf(),
            message,
        };
        let file = object::File::parse(bytes).map_err(|e| elf_error(e.to_string()))?;
        if file.format() != object::BinaryFormat::Elf {
            return Err(elf_error(format!(
                "the file is {:?}, not ELF",
                file.format()
            )));
        }
        let mut fp = Footprint {
            code_bytes: 0,
            rodata_bytes: 0,
            data_bytes: 0,
            zeroed_bytes: 0,
            flash_bytes: 0,
            ram_bytes: 0,
            stack_bytes: 0,
            sections: Vec::new(),
        };
        for section in file.sections() {
            let SectionFlags::Elf { sh_type, sh_flags } = section.flags() else {
                continue;
            };
            if sh_flags.0 & SHF_ALLOC.0 == 0 {
                continue;
            }
            let name = section
                .name()
                .map_err(|e| elf_error(format!("a section name cannot be read: {e}")))?;
            let class = if name == STACK_SECTION {
                SectionClass::Stack
            } else if sh_type == SHT_NOBITS {
                SectionClass::Zeroed
            } else if sh_flags.0 & SHF_WRITE.0 != 0 {
                SectionClass::Data
            } else if sh_flags.0 & SHF_EXECINSTR.0 != 0 {
                SectionClass::Code
            } else {
                SectionClass::ReadOnly
            };
            let size = section.size();
            if size == 0 {
                // Empty output sections keep the linker's default flags (an empty `.data` is
                // not marked writable), so they would only be listed under a wrong class.
                continue;
            }
            match class {
                SectionClass::Code => fp.code_bytes += size,
                SectionClass::ReadOnly => fp.rodata_bytes += size,
                SectionClass::Data => fp.data_bytes += size,
                SectionClass::Zeroed => fp.zeroed_bytes += size,
                SectionClass::Stack => fp.stack_bytes += size,
            }
            fp.flash_bytes += class.flash(size);
            fp.ram_bytes += class.ram(size);
            fp.sections.push(Section {
                name: name.to_string(),
                address: section.address(),
                size,
                class,
            });
        }
        Ok(fp)
    }
}

/// Reads the ELF image at `elf` and returns its footprint.
pub fn footprint(elf: &Path) -> Result<Footprint, OnchipError> {
    let bytes = std::fs::read(elf).map_err(|err| OnchipError::Io {
        path: elf.to_path_buf(),
        action: "cannot read the firmware image",
        err,
    })?;
    Footprint::from_elf_bytes(elf, &bytes)
}

/// True when the loaded (non-`NOBITS`), allocated, read-only contents of the image contain
/// `needle` (how a build checks that its job blob was embedded). An empty needle is always
/// contained.
pub(crate) fn embeds(bytes: &[u8], needle: &[u8]) -> bool {
    if needle.is_empty() {
        return true;
    }
    let Ok(file) = object::File::parse(bytes) else {
        return false;
    };
    file.sections().any(|section| match section.flags() {
        SectionFlags::Elf { sh_type, sh_flags } => {
            sh_flags.0 & SHF_ALLOC.0 != 0
                && sh_flags.0 & SHF_WRITE.0 == 0
                && sh_type != SHT_NOBITS
                && section
                    .data()
                    .is_ok_and(|data| data.windows(needle.len()).any(|w| w == needle))
        }
        _ => false,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn non_elf_input_is_a_clear_error() {
        let err = Footprint::from_elf_bytes(Path::new("x.bin"), b"not an object file").unwrap_err();
        assert!(
            err.to_string()
                .starts_with("x.bin: not a readable ELF image"),
            "{err}"
        );
        assert!(!embeds(b"garbage", b"ab"));
        assert!(embeds(b"garbage", b""));
    }

    /// The test binary itself is an ELF image on Linux: its `.text` is code, its `.bss` is
    /// zeroed RAM, and the totals are the sums over the classes (ELF gABI section types and
    /// flags; a fact of the trade).
    #[cfg(target_os = "linux")]
    #[test]
    fn the_running_test_binary_is_classified() {
        let exe = std::env::current_exe().unwrap();
        let fp = footprint(&exe).unwrap();
        let text = fp.section(".text").expect(".text");
        assert_eq!(text.class, SectionClass::Code);
        assert!(text.size > 0);
        assert_eq!(
            fp.section(".bss").expect(".bss").class,
            SectionClass::Zeroed
        );
        assert_eq!(
            fp.section(".rodata").expect(".rodata").class,
            SectionClass::ReadOnly
        );
        assert_eq!(
            fp.section(".data").expect(".data").class,
            SectionClass::Data
        );
        assert!(fp.section(".symtab").is_none(), "not allocated");
        let sum = |f: fn(SectionClass, u64) -> u64| {
            fp.sections.iter().map(|s| f(s.class, s.size)).sum::<u64>()
        };
        assert_eq!(fp.flash_bytes, sum(SectionClass::flash));
        assert_eq!(fp.ram_bytes, sum(SectionClass::ram));
        assert_eq!(
            fp.flash_bytes,
            fp.code_bytes + fp.rodata_bytes + fp.data_bytes
        );
        assert_eq!(fp.ram_bytes, fp.data_bytes + fp.zeroed_bytes);
        let bytes = std::fs::read(&exe).unwrap();
        assert!(
            embeds(&bytes, b"not a readable ELF image"),
            "a string constant of this crate"
        );
        // 32 bytes drawn at run time from the file's own length cannot be a constant in it.
        let mut x = bytes.len() as u64 | 1;
        let absent: Vec<u8> = (0..32)
            .map(|_| {
                x ^= x << 13;
                x ^= x >> 7;
                x ^= x << 17;
                (x >> 56) as u8
            })
            .collect();
        assert!(!embeds(&bytes, &absent));
    }
}
