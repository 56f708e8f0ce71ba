//! Wider vector instructions where the processor has them, chosen at run time: the hot loops are
//! compiled twice, for the x86-64 baseline (SSE2) and for AVX2 with FMA, and the second runs when
//! the processor reports both. The compiler never fuses a multiply and an add on its own (Rust
//! allows no such contraction), so both builds do the same IEEE operations in the same order and
//! give the same bits; a test checks it on whole runs (`tests/wide_paths.rs`). The page's wasm has
//! its own two builds (simd128 and baseline), chosen by the worker.

use std::sync::atomic::{AtomicU8, Ordering};

/// 0: not asked yet, 1: baseline, 2: AVX2 and FMA.
static LEVEL: AtomicU8 = AtomicU8::new(0);

/// Whether the wide path runs: the processor has AVX2 and FMA, and `PATCHGRAPH_BASELINE` is not
/// set (tests and benchmarks compare the two paths with it).
pub fn wide() -> bool {
    match LEVEL.load(Ordering::Relaxed) {
        0 => {
            let wide = has_wide() && std::env::var_os("PATCHGRAPH_BASELINE").is_none();
            LEVEL.store(if wide { 2 } else { 1 }, Ordering::Relaxed);
            wide
        }
        level => level == 2,
    }
}

#[cfg(target_arch = "x86_64")]
fn has_wide() -> bool {
    std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma")
}

#[cfg(not(target_arch = "x86_64"))]
fn has_wide() -> bool {
    false
}

/// `$vis fn $name(args) -> ret` calling `$body(args)`, compiled for AVX2 and FMA when [`wide`]
/// says so, else as it is. `$body` should be `#[inline(always)]` so that its loops are compiled
/// inside the wide copy.
macro_rules! dispatch {
    ($(#[$m:meta])* $vis:vis fn $name:ident($($a:ident: $t:ty),* $(,)?) $(-> $r:ty)? => $body:ident) => {
        $(#[$m])*
        $vis fn $name($($a: $t),*) $(-> $r)? {
            #[cfg(target_arch = "x86_64")]
            {
                #[target_feature(enable = "avx2,fma")]
                fn wide_copy($($a: $t),*) $(-> $r)? {
                    $body($($a),*)
                }
                if $crate::simd::wide() {
                    // SAFETY: the processor has AVX2 and FMA (checked at run time by `wide`).
                    return unsafe { wide_copy($($a),*) };
                }
            }
            $body($($a),*)
        }
    };
}
pub(crate) use dispatch;
