// Hot loops compiled once per x86-64 vector extension, chosen at run time.
//
// A function marked with it must give the same bits whatever the clone: its
// vector lanes hold independent values (different variants, or fixed partial
// sums added in a fixed order), floating-point contraction is off for the
// whole build, and it calls no library function whose result could differ.
// Shards of one scan may run on different cluster nodes, and their merge
// must equal a whole run.
#pragma once

#if defined(__GNUC__) && !defined(__clang__) && defined(__x86_64__) && !defined(TAMIS_NO_CLONES)
#define TAMIS_HAVE_VECTOR_CLONES 1
#define TAMIS_VECTOR_CLONES __attribute__((target_clones("avx512f", "avx2", "default")))
#else
#define TAMIS_HAVE_VECTOR_CLONES 0
#define TAMIS_VECTOR_CLONES
#endif

// For the small helpers such a function calls, so that they are compiled
// with the clone's instructions.
#define TAMIS_ALWAYS_INLINE inline __attribute__((always_inline))
