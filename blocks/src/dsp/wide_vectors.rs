//! Hot per-sample loops compiled twice: for the baseline x86-64 the crate is
//! built for (four float32 per vector) and for AVX2 (eight), picked at run
//! time. Both run the same IEEE operations in the same order (Rust never
//! fuses a multiply and an add on its own), so results are bit-identical;
//! only the vector width differs.

/// Define a function whose body is also compiled for AVX2 and run that way
/// when the CPU has it. Parameters are plain names (no patterns).
macro_rules! wide_vectors {
    ($(#[$attr:meta])* $vis:vis fn $name:ident($($arg:ident: $ty:ty),* $(,)?) -> $ret:ty $body:block) => {
        $(#[$attr])*
        $vis fn $name($($arg: $ty),*) -> $ret {
            #[inline(always)]
            fn portable($($arg: $ty),*) -> $ret $body
            #[cfg(target_arch = "x86_64")]
            {
                #[target_feature(enable = "avx2")]
                fn avx2($($arg: $ty),*) -> $ret {
                    portable($($arg),*)
                }
                if std::arch::is_x86_feature_detected!("avx2") {
                    // Calling a function built for AVX2 is unsafe only on a CPU without it.
                    #[allow(unsafe_code)]
                    // SAFETY: the CPU has AVX2, checked just above.
                    return unsafe { avx2($($arg),*) };
                }
            }
            portable($($arg),*)
        }
    };
}

pub(crate) use wide_vectors;
