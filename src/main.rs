//! restvolt's binary: parse the command line, run, map the outcome to a message and an exit code.

use std::process::ExitCode;

/// mimalloc rather than the system allocator. A large fleet is read, judged
/// and written on several threads that allocate and free many small objects
/// (rows, reasons, strings of the report) and free each other's: glibc's
/// allocator either serialised them on one arena's lock or, with an arena
/// per thread, could not reuse one thread's freed memory on another and
/// held 45 MB more. On the 1,000,000-reading benchmark mimalloc took about a
/// fifth off the time (README § Performance) at a peak still under 150 MB.
#[global_allocator]
static GLOBAL: mimalloc::MiMalloc = mimalloc::MiMalloc;

/// `mi_option_purge_delay`'s index in mimalloc v3's `mi_option_e`
/// (`c_src/mimalloc/v3/include/mimalloc.h` of libmimalloc-sys 0.1.49, pinned
/// in Cargo.toml for this reason).
const MI_OPTION_PURGE_DELAY: libmimalloc_sys::mi_option_t = 15;

/// How long freed memory stays with the process before it is returned to the
/// system, in milliseconds (this mimalloc's default is 1000). The per-unit summaries
/// are freed while the reports that replace them are built; returning their
/// pages sooner kept the peak at 130 MB instead of 152 MB. 2 ms cost less
/// time than 0 (immediate), which returned pages on almost every free and was
/// slower than glibc on 10,000,000 readings; 10 and 50 ms gained nothing.
const PURGE_DELAY_MS: std::ffi::c_long = 2;

fn main() -> ExitCode {
    tune_allocator();
    restvolt::cli::main_with_args(std::env::args_os())
}

/// Set the purge delay unless the user chose one (`MIMALLOC_PURGE_DELAY`),
/// and on Linux keep this process on ordinary pages.
fn tune_allocator() {
    no_huge_pages();
    if std::env::var_os("MIMALLOC_PURGE_DELAY").is_none() {
        // SAFETY: mi_option_set only stores an allocator parameter, which
        // mimalloc reads again whenever it next purges; the index is checked
        // against the pinned version's header (see the constant).
        unsafe {
            libmimalloc_sys::mi_option_set(MI_OPTION_PURGE_DELAY, PURGE_DELAY_MS);
        }
    }
}

/// Turn transparent huge pages off for this process unless the user set
/// `MIMALLOC_ALLOW_THP`. mimalloc asks for them where the system offers them
/// on request; each is then zeroed whole, 2 MiB at a time, also where little
/// of it is used, and pages freed and taken again were zeroed anew. On the
/// benchmark that was a sixth of the run, and 7 MB more at the peak.
#[cfg(target_os = "linux")]
fn no_huge_pages() {
    if std::env::var_os("MIMALLOC_ALLOW_THP").is_none() {
        // SAFETY: PR_SET_THP_DISABLE only sets a flag of this process that
        // the kernel reads when it maps memory; no pointer is passed.
        unsafe {
            libc::prctl(libc::PR_SET_THP_DISABLE, 1, 0, 0, 0);
        }
    }
}

#[cfg(not(target_os = "linux"))]
fn no_huge_pages() {}

#[cfg(test)]
mod tests {
    use super::*;

    /// The option index names the purge delay: it holds that option's default,
    /// 1000 ms (`c_src/mimalloc/v3/src/options.c` of the pinned version, where no
    /// other option defaults to 1000), and setting it is read back.
    #[test]
    fn the_index_names_the_purge_delay() {
        if std::env::var_os("MIMALLOC_PURGE_DELAY").is_some() {
            return;
        }
        // SAFETY: reading and setting an allocator option, as in main.
        unsafe {
            assert_eq!(libmimalloc_sys::mi_option_get(MI_OPTION_PURGE_DELAY), 1000);
            tune_allocator();
            assert_eq!(
                libmimalloc_sys::mi_option_get(MI_OPTION_PURGE_DELAY),
                PURGE_DELAY_MS
            );
        }
    }
}
