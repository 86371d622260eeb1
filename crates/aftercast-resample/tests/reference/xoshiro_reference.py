"""Independent transcription of Xoshiro256++ (Blackman & Vigna 2018) and SplitMix64
(Steele, Lea & Flood 2014) used to produce the reference outputs asserted in src/rng.rs.
Plain Python 3.11, no packages."""
M = (1 << 64) - 1


def rotl(x, k):
    return ((x << k) | (x >> (64 - k))) & M


def xoshiro256pp(s):
    while True:
        r = (rotl((s[0] + s[3]) & M, 23) + s[0]) & M
        t = (s[1] << 17) & M
        s[2] ^= s[0]
        s[3] ^= s[1]
        s[1] ^= s[2]
        s[0] ^= s[3]
        s[2] ^= t
        s[3] = rotl(s[3], 45)
        yield r


def splitmix64(state):
    while True:
        state = (state + 0x9E3779B97F4A7C15) & M
        z = state
        z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & M
        z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & M
        yield z ^ (z >> 31)


if __name__ == "__main__":
    g = xoshiro256pp([1, 2, 3, 4])
    print("xoshiro256++ {1,2,3,4}:", [next(g) for _ in range(3)])
    print("splitmix64 1234567:", next(splitmix64(1234567)))
