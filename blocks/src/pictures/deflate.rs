//! A zlib stream (RFC 1950, deflate of RFC 1951) made for the pictures'
//! `Up`-filtered PNG rows.
//!
//! Our plots are flat colour, so 88-97 % of the filtered bytes are zeros
//! in long runs. A general deflater (zlib-rs at level 1 was ~40 % of a
//! picture's time) hashes every position it passes and slides its hash
//! tables every 32 KiB. Here a zero run after a zero is found eight bytes
//! at a time and sent as matches one byte back, without hashing; only the
//! other bytes are hashed (greedy matching, one candidate per hash slot,
//! as zlib's fastest level does), and the symbols go out in blocks with
//! their own Huffman codes (the method of D. A. Huffman, "A Method for the
//! Construction of Minimum-Redundancy Codes", Proc. IRE 40(9), 1952;
//! lengths limited to 15 bits by halving the counts until they fit).

const WINDOW: usize = 32768;
const MAX_MATCH: usize = 258;
/// Matches found by the hash must be this long; a zero run needs only 3.
const MIN_HASHED_MATCH: usize = 4;
const HASH_BITS: u32 = 14;
/// Literals in a row after which only every other position is hashed.
const SKIP_AFTER: u32 = 16;
/// Symbols per block: each block gets codes fitted to its own symbols.
const BLOCK_SYMBOLS: usize = 1 << 15;
/// Marks a match in the symbol buffer: length << 16 | distance.
const MATCH: u32 = 1 << 31;
/// The order in which a block header gives the code-length code's lengths.
const CL_ORDER: [usize; 19] = [16, 17, 18, 0, 8, 7, 9, 6, 10, 5, 11, 4, 12, 3, 13, 2, 14, 1, 15];

/// A zlib stream made a piece at a time ([`Deflater::start`], then
/// [`Deflater::feed`] as the data grow, then [`Deflater::finish`]), so that
/// each piece is compressed while it is still in the cache; the buffers
/// are kept between pictures by whoever owns the deflater.
pub struct Deflater {
    head: Vec<u32>,
    /// The block's symbols: a literal byte, or [`MATCH`] with the length
    /// and distance symbols and their extra bits (see [`Deflater::push_match`]).
    syms: Vec<u32>,
    /// The block's symbol counts, kept as the symbols are found.
    lit_freq: [u32; 286],
    dist_freq: [u32; 30],
    /// The first byte not yet coded, and bits not yet written out.
    pos: usize,
    acc: u64,
    n_bits: u32,
}

impl Default for Deflater {
    fn default() -> Self {
        Deflater {
            head: Vec::new(),
            syms: Vec::new(),
            lit_freq: [0; 286],
            dist_freq: [0; 30],
            pos: 0,
            acc: 0,
            n_bits: 0,
        }
    }
}

impl Deflater {
    /// Append the zlib stream of `data` to `out`, in one piece.
    pub fn zlib(&mut self, data: &[u8], out: &mut Vec<u8>) {
        self.start(out);
        self.feed(data, true, out);
        self.finish(zlib_rs::adler32::adler32(1, data), out);
    }

    /// Begin a stream in `out`.
    pub fn start(&mut self, out: &mut Vec<u8>) {
        // CMF: deflate with a 32 KiB window; FLG: fastest level, check bits.
        out.extend_from_slice(&[0x78, 0x01]);
        self.head.clear();
        self.head.resize(1 << HASH_BITS, 0);
        self.new_block();
        (self.pos, self.acc, self.n_bits) = (0, 0, 0);
    }

    /// Code `data` (all the stream's data so far, a longer slice each call)
    /// from where the last call stopped; short of the end unless `all`,
    /// so that no match is cut off by where this piece happens to end.
    pub fn feed(&mut self, data: &[u8], all: bool, out: &mut Vec<u8>) {
        let mut bits = Bits { out, acc: self.acc, n: self.n_bits };
        let n = data.len();
        let stop = if all { n } else { n.saturating_sub(MAX_MATCH) };
        let mut i = self.pos;
        let mut misses = 0;
        while i < stop {
            if self.syms.len() >= BLOCK_SYMBOLS {
                self.write_block(false, &mut bits);
                self.new_block();
            }
            let byte = data[i];
            if byte == 0 && i > 0 && data[i - 1] == 0 {
                let run = same_run(data, i - 1, i, MAX_MATCH);
                if run >= 3 {
                    self.push_match(run, 1);
                    i += run;
                    continue;
                }
            }
            // Past a long stretch of literals (text, anti-aliased curves)
            // only every other position is looked up.
            if i + 4 <= n && (misses < SKIP_AFTER || i & 1 == 0) {
                let key = u32::from_le_bytes([data[i], data[i + 1], data[i + 2], data[i + 3]]);
                let slot = (key.wrapping_mul(0x9E37_79B1) >> (32 - HASH_BITS)) as usize;
                let earlier = std::mem::replace(&mut self.head[slot], i as u32 + 1) as usize;
                let from = earlier.wrapping_sub(1);
                // The slot may hold another key: its four bytes first.
                if earlier != 0
                    && i - from <= WINDOW
                    && u32::from_le_bytes([data[from], data[from + 1], data[from + 2], data[from + 3]]) == key
                {
                    let len = 4 + same_run(data, from + 4, i + 4, MAX_MATCH - 4);
                    if len >= MIN_HASHED_MATCH {
                        misses = 0;
                        self.push_match(len, i - from);
                        i += len;
                        continue;
                    }
                }
            }
            self.syms.push(u32::from(byte));
            self.lit_freq[usize::from(byte)] += 1;
            misses += 1;
            i += 1;
        }
        self.pos = i;
        (self.acc, self.n_bits) = (bits.acc, bits.n);
    }

    /// End the stream: the last block, then `adler`, the Adler-32 of all
    /// the data (RFC 1950, 2.2).
    pub fn finish(&mut self, adler: u32, out: &mut Vec<u8>) {
        let mut bits = Bits { out, acc: self.acc, n: self.n_bits };
        self.write_block(true, &mut bits);
        bits.flush();
        out.extend_from_slice(&adler.to_be_bytes());
    }

    fn new_block(&mut self) {
        self.syms.clear();
        self.lit_freq = [0; 286];
        self.dist_freq = [0; 30];
    }

    /// Record a match, its symbols and extra bits worked out once: bit 31
    /// set, length symbol - 257 in bits 23..28, distance symbol in 18..23,
    /// the length's extra bits in 13..18 and the distance's in 0..13.
    #[inline]
    fn push_match(&mut self, len: usize, dist: usize) {
        let (lsym, _, lextra) = length_code(len);
        let (dsym, _, dextra) = distance_code(dist);
        self.lit_freq[lsym] += 1;
        self.dist_freq[dsym] += 1;
        self.syms.push(MATCH | ((lsym as u32 - 257) << 23) | ((dsym as u32) << 18) | (lextra << 13) | dextra);
    }
}

/// How many bytes from `at` (at most `max`, not past the end) equal those
/// from `from` (`from < at`; the two may overlap, as a deflate match may).
#[inline(always)]
fn same_run(data: &[u8], from: usize, at: usize, max: usize) -> usize {
    let end = (at + max).min(data.len());
    let (a, b) = (&data[from..from + (end - at)], &data[at..end]);
    let mut k = 0;
    // 32 bytes a step (compared as vectors), then 8, then one.
    for (x, y) in a.chunks_exact(32).zip(b.chunks_exact(32)) {
        let x: &[u8; 32] = x.try_into().expect("32 bytes");
        let y: &[u8; 32] = y.try_into().expect("32 bytes");
        if x != y {
            break;
        }
        k += 32;
    }
    for (x, y) in a[k..].chunks_exact(8).zip(b[k..].chunks_exact(8)) {
        let x = u64::from_le_bytes(x.try_into().expect("eight bytes"));
        let y = u64::from_le_bytes(y.try_into().expect("eight bytes"));
        if x != y {
            return k + ((x ^ y).trailing_zeros() / 8) as usize;
        }
        k += 8;
    }
    k + a[k..].iter().zip(&b[k..]).take_while(|(x, y)| x == y).count()
}

/// Deflate's length symbol (257..=285) for a match of `len` (3..=258),
/// with its extra bits' count and value.
#[inline]
fn length_code(len: usize) -> (usize, u32, u32) {
    if len == MAX_MATCH {
        return (285, 0, 0);
    }
    let l = (len - 3) as u32;
    if l < 8 {
        return (257 + l as usize, 0, 0);
    }
    let top = 31 - l.leading_zeros();
    let extra = top - 2;
    (257 + 4 * (top as usize - 1) + ((l >> extra) & 3) as usize, extra, l & ((1 << extra) - 1))
}

/// Deflate's distance symbol (0..=29) for `dist` (1..=32768), with its
/// extra bits' count and value.
#[inline]
fn distance_code(dist: usize) -> (usize, u32, u32) {
    let d = (dist - 1) as u32;
    if d < 4 {
        return (d as usize, 0, 0);
    }
    let top = 31 - d.leading_zeros();
    let extra = top - 1;
    (2 * top as usize + ((d >> extra) & 1) as usize, extra, d & ((1 << extra) - 1))
}

/// Bits written least significant first, as deflate packs them.
struct Bits<'a> {
    out: &'a mut Vec<u8>,
    acc: u64,
    n: u32,
}

impl Bits<'_> {
    /// Append the low `len` (at most 32) bits of `value`.
    #[inline]
    fn put(&mut self, value: u32, len: u32) {
        self.acc |= u64::from(value) << self.n;
        self.n += len;
        if self.n >= 32 {
            self.out.extend_from_slice(&(self.acc as u32).to_le_bytes());
            self.acc >>= 32;
            self.n -= 32;
        }
    }

    /// Write out the bits left, the last byte padded with zeros.
    fn flush(&mut self) {
        let bytes = self.n.div_ceil(8) as usize;
        self.out.extend_from_slice(&self.acc.to_le_bytes()[..bytes]);
        self.acc = 0;
        self.n = 0;
    }
}

/// A Huffman code: each symbol's length and its bits in writing order.
struct Code {
    lens: Vec<u8>,
    bits: Vec<u32>,
}

impl Code {
    /// The code for symbol counts `freqs`, no length over `limit`. At least
    /// two symbols get a code (one more is given a count if needed): a
    /// decoder refuses a code-length code of a single symbol.
    fn new(freqs: &mut [u32], limit: u32) -> Code {
        for s in 0..freqs.len() {
            if freqs.iter().filter(|&&f| f > 0).count() >= 2 {
                break;
            }
            if freqs[s] == 0 {
                freqs[s] = 1;
            }
        }
        let lens = limited_lengths(freqs, limit);
        Code { bits: canonical(&lens), lens }
    }

    #[inline]
    fn put(&self, symbol: usize, bits: &mut Bits<'_>) {
        bits.put(self.bits[symbol], u32::from(self.lens[symbol]));
    }
}

/// Huffman code lengths for `freqs`, the counts halved (each kept at
/// least 1) until no length exceeds `limit`.
fn limited_lengths(freqs: &[u32], limit: u32) -> Vec<u8> {
    let mut counts = freqs.to_vec();
    loop {
        let mut leaves: Vec<(u32, usize)> =
            counts.iter().enumerate().filter(|(_, c)| **c > 0).map(|(s, c)| (*c, s)).collect();
        leaves.sort_unstable();
        let m = leaves.len();
        let mut lens = vec![0u8; freqs.len()];
        if m < 2 {
            for &(_, s) in &leaves {
                lens[s] = 1;
            }
            return lens;
        }
        // Two queues: the sorted leaves, and the inner nodes, which are
        // made in order of weight. Node k < m is leaf k; a parent always
        // comes after its children.
        let mut weight: Vec<u64> = leaves.iter().map(|&(c, _)| u64::from(c)).collect();
        weight.resize(2 * m - 1, 0);
        let mut parent = vec![0usize; 2 * m - 1];
        let (mut leaf, mut inner) = (0, m);
        for node in m..2 * m - 1 {
            let mut take = || {
                let use_leaf = leaf < m && (inner >= node || weight[leaf] <= weight[inner]);
                if use_leaf {
                    leaf += 1;
                    leaf - 1
                } else {
                    inner += 1;
                    inner - 1
                }
            };
            let (a, b) = (take(), take());
            weight[node] = weight[a] + weight[b];
            parent[a] = node;
            parent[b] = node;
        }
        let mut depth = vec![0u32; 2 * m - 1];
        for k in (0..2 * m - 2).rev() {
            depth[k] = depth[parent[k]] + 1;
        }
        if depth[..m].iter().all(|&d| d <= limit) {
            for (k, &(_, s)) in leaves.iter().enumerate() {
                lens[s] = depth[k] as u8;
            }
            return lens;
        }
        for c in counts.iter_mut().filter(|c| **c > 0) {
            *c = c.div_ceil(2);
        }
    }
}

/// The canonical codes for `lens` (RFC 1951, 3.2.2), bit-reversed for
/// writing least significant bit first.
fn canonical(lens: &[u8]) -> Vec<u32> {
    let mut count = [0u32; 16];
    for &l in lens {
        count[usize::from(l)] += 1;
    }
    count[0] = 0;
    let mut next = [0u32; 16];
    let mut code = 0;
    for l in 1..16 {
        code = (code + count[l - 1]) << 1;
        next[l] = code;
    }
    lens.iter()
        .map(|&l| {
            if l == 0 {
                return 0;
            }
            let c = next[usize::from(l)];
            next[usize::from(l)] += 1;
            c.reverse_bits() >> (32 - u32::from(l))
        })
        .collect()
}

impl Deflater {
    /// The block's symbols with codes made for them (a dynamic block).
    fn write_block(&mut self, last: bool, bits: &mut Bits<'_>) {
        self.lit_freq[256] = 1;
        let lit = Code::new(&mut self.lit_freq, 15);
        let dist = Code::new(&mut self.dist_freq, 15);
        bits.put(u32::from(last), 1);
        bits.put(2, 2);
        write_codes(&lit, &dist, bits);
        for &s in &self.syms {
            if s & MATCH == 0 {
                lit.put(s as usize, bits);
            } else {
                let l = (s >> 23 & 31) as usize;
                let sym = 257 + l;
                let len = u32::from(lit.lens[sym]);
                bits.put(lit.bits[sym] | (s >> 13 & 31) << len, len + LEN_EXTRA[l]);
                let d = (s >> 18 & 31) as usize;
                let len = u32::from(dist.lens[d]);
                bits.put(dist.bits[d] | (s & 0x1fff) << len, len + DIST_EXTRA[d]);
            }
        }
        lit.put(256, bits);
    }
}

/// Extra bits of each length symbol (from 257) and distance symbol.
const LEN_EXTRA: [u32; 29] = [0, 0, 0, 0, 0, 0, 0, 0, 1, 1, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3, 4, 4, 4, 4, 5, 5, 5, 5, 0];
const DIST_EXTRA: [u32; 30] =
    [0, 0, 0, 0, 1, 1, 2, 2, 3, 3, 4, 4, 5, 5, 6, 6, 7, 7, 8, 8, 9, 9, 10, 10, 11, 11, 12, 12, 13, 13];

/// A dynamic block's header after its first three bits: the two codes'
/// lengths, run-length coded (symbols 16, 17, 18) under a code of their own.
fn write_codes(lit: &Code, dist: &Code, bits: &mut Bits<'_>) {
    let hlit = 257.max(lit.lens.iter().rposition(|&l| l > 0).map_or(0, |p| p + 1));
    let hdist = 1.max(dist.lens.iter().rposition(|&l| l > 0).map_or(0, |p| p + 1));
    let all: Vec<u8> = lit.lens[..hlit].iter().chain(&dist.lens[..hdist]).copied().collect();
    let mut tokens: Vec<(u8, u8)> = Vec::new();
    let mut i = 0;
    while i < all.len() {
        let v = all[i];
        let run = all[i..].iter().take_while(|&&x| x == v).count();
        let mut left = run;
        if v == 0 {
            while left >= 11 {
                let k = left.min(138);
                tokens.push((18, (k - 11) as u8));
                left -= k;
            }
            if left >= 3 {
                tokens.push((17, (left - 3) as u8));
                left = 0;
            }
        } else {
            tokens.push((v, 0));
            left -= 1;
            while left >= 3 {
                let k = left.min(6);
                tokens.push((16, (k - 3) as u8));
                left -= k;
            }
        }
        tokens.extend(std::iter::repeat_n((v, 0), left));
        i += run;
    }
    let mut cl_freq = [0u32; 19];
    for &(t, _) in &tokens {
        cl_freq[usize::from(t)] += 1;
    }
    let cl = Code::new(&mut cl_freq, 7);
    let hclen = 4.max(CL_ORDER.iter().rposition(|&s| cl.lens[s] > 0).map_or(0, |p| p + 1));

    bits.put((hlit - 257) as u32, 5);
    bits.put((hdist - 1) as u32, 5);
    bits.put((hclen - 4) as u32, 4);
    for &s in &CL_ORDER[..hclen] {
        bits.put(u32::from(cl.lens[s]), 3);
    }
    for &(t, extra) in &tokens {
        cl.put(usize::from(t), bits);
        match t {
            16 => bits.put(u32::from(extra), 2),
            17 => bits.put(u32::from(extra), 3),
            18 => bits.put(u32::from(extra), 7),
            _ => {}
        }
    }
}

#[cfg(test)]
mod tests {
    use super::{Deflater, distance_code, length_code};

    /// The RFC 1951 tables (3.2.5), spelled out.
    #[test]
    fn length_and_distance_codes_follow_the_rfc_tables() {
        assert_eq!(length_code(3), (257, 0, 0));
        assert_eq!(length_code(10), (264, 0, 0));
        assert_eq!(length_code(12), (265, 1, 1));
        assert_eq!(length_code(13), (266, 1, 0));
        assert_eq!(length_code(22), (269, 2, 3));
        assert_eq!(length_code(130), (280, 4, 15));
        assert_eq!(length_code(257), (284, 5, 30));
        assert_eq!(length_code(258), (285, 0, 0));
        assert_eq!(distance_code(1), (0, 0, 0));
        assert_eq!(distance_code(4), (3, 0, 0));
        assert_eq!(distance_code(6), (4, 1, 1));
        assert_eq!(distance_code(7), (5, 1, 0));
        assert_eq!(distance_code(3601), (23, 10, 528));
        assert_eq!(distance_code(24577), (29, 13, 0));
        assert_eq!(distance_code(32768), (29, 13, 8191));
    }

    /// Streams of every kind round-trip through flate2's inflater (an
    /// independent decoder).
    #[test]
    fn streams_inflate_to_their_data() {
        let mut state = 12345u32;
        let mut noise = move || {
            state = state.wrapping_mul(1_103_515_245).wrapping_add(12345);
            (state >> 16) as u8
        };
        let mut cases: Vec<Vec<u8>> = vec![vec![], vec![0], vec![7], vec![0; 100_000], vec![0, 0, 0, 1, 0, 0, 0, 0]];
        cases.push((0..300_000).map(|_| noise()).collect());
        // Mostly zeros with short bursts and repeats far back (past the window too).
        let mut mixed = vec![0u8; 400_000];
        for k in (0..mixed.len()).step_by(997) {
            for j in 0..(k % 13) {
                mixed[(k + j) % 400_000] = (k / 997 % 7) as u8 + j as u8;
            }
        }
        cases.push(mixed);
        cases.push((0..70_000).map(|i| (i % 3) as u8 * 40 + (i / 5000) as u8).collect());
        let mut deflater = Deflater::default();
        for data in &cases {
            let mut z = Vec::new();
            deflater.zlib(data, &mut z);
            let back = super::super::png_file::tests::inflate(&z);
            assert_eq!(back.len(), data.len());
            assert!(back == *data, "stream of {} bytes changed", data.len());
        }
    }
}
