/*
 * The strict Decimal String reading shared by src/dicom/ (ds_value.h), whose
 * fast paths must give exactly what the plain ones give: ds_scan (one pass
 * over a value in a list, short decimals by one exact division) against
 * glibc's strtod, the outside reference (correctly rounded), bit for bit,
 * and against ds_convert on what it accepts; ds_delimiters (eight bytes at a
 * time) against a count byte by byte. C++ because the header is the C++
 * bridge's; TAP on standard output, no Check needed.
 */
#include "../../src/dicom/ds_value.h"

#include <cerrno>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <random>
#include <string>
#include <vector>

using sl_dicom_internal::ds_convert;
using sl_dicom_internal::ds_delimiters;
using sl_dicom_internal::ds_scan;

static int test_no = 0, failed = 0;

static void ok(bool pass, const std::string &what)
{
    test_no++;
    if (!pass)
        failed++;
    printf("%s %d - %s\n", pass ? "ok" : "not ok", test_no, what.c_str());
}

/* A value of the DS grammar: coordinate-like decimals, full-precision
 * values with exponents, long digit strings (past the fast path's 19
 * digits and 2^53), signs, leading and trailing spaces. */
static std::string random_ds(std::mt19937_64 &g)
{
    char buf[80];
    std::string s;
    switch (g() % 5) {
    case 0: {
        double v = static_cast<double>(static_cast<int64_t>(g() % 2000000000ULL) - 1000000000LL) /
                   static_cast<double>(1ULL << (g() % 40));
        snprintf(buf, sizeof buf, "%.*f", static_cast<int>(g() % 12), v);
        s = buf;
        break;
    }
    case 1:
        snprintf(buf, sizeof buf, "%.17g",
                 std::ldexp(static_cast<double>(g() >> 11), static_cast<int>(g() % 200) - 150));
        s = buf;
        break;
    default: {
        int len = 1 + static_cast<int>(g() % 30), point = static_cast<int>(g() % (len + 2)) - 1;
        if (g() % 3 == 0)
            s += "+-"[g() % 2];
        for (int i = 0; i < len; i++) {
            if (i == point)
                s += '.';
            s += static_cast<char>('0' + g() % 10);
        }
        if (point == len)
            s += '.';
        if (g() % 4 == 0) {
            snprintf(buf, sizeof buf, "%c%d", "eE"[g() % 2], static_cast<int>(g() % 60) - 30);
            s += buf;
        }
    }
    }
    if (g() % 8 == 0)
        s = " " + s;
    if (g() % 8 == 0)
        s += " ";
    return s;
}

int main()
{
    std::mt19937_64 g(20261202);

    /* 1. valid values, alone and as the first of a list: strtod's double */
    const long N = 400000;
    long same = 0, checked = 0;
    std::string first_bad;
    for (long t = 0; t < N; t++) {
        std::string v = random_ds(g);
        std::string list = v + "\\1.5";
        errno = 0;
        double ref = strtod(v.c_str(), nullptr);
        bool normal = errno == 0 && std::isfinite(ref) && (ref == 0 || std::fabs(ref) >= DBL_MIN);
        const char *next = nullptr;
        double got = 0;
        bool accepted = ds_scan(list.data(), list.data() + list.size(), &next, got);
        if (!normal) {
            /* out of range: refused, as ds_convert refuses it */
            double c;
            if (accepted == ds_convert(v.data(), v.data() + v.size(), c))
                same++;
            else if (first_bad.empty())
                first_bad = v;
            continue;
        }
        checked++;
        if (accepted && next == list.data() + v.size() && std::memcmp(&got, &ref, sizeof got) == 0)
            same++;
        else if (first_bad.empty())
            first_bad = v;
    }
    ok(same == N, "ds_scan gives strtod's double bit for bit (" + std::to_string(checked) +
                      " values in range, the rest refused as ds_convert refuses them)" +
                      (first_bad.empty() ? "" : ": first difference '" + first_bad + "'"));

    /* 2. any text: ds_scan accepts a value exactly when ds_convert accepts
     * it up to the next delimiter, with the same double */
    const char alphabet[] = "0123456789.+-eE \\x";
    long agree = 0;
    const long M = 400000;
    first_bad.clear();
    for (long t = 0; t < M; t++) {
        std::string s;
        size_t n = g() % 16;
        for (size_t i = 0; i < n; i++)
            s += g() % 2 ? static_cast<char>('0' + g() % 10) : alphabet[g() % (sizeof alphabet - 1)];
        const char *b = s.data(), *e = s.data() + s.size();
        const char *q = static_cast<const char *>(std::memchr(b, '\\', s.size()));
        if (!q)
            q = e;
        double a = 0, c = 0;
        const char *next = nullptr;
        bool x = ds_convert(b, q, a), y = ds_scan(b, e, &next, c);
        if (x == y && (!x || (std::memcmp(&a, &c, sizeof a) == 0 && next == q)))
            agree++;
        else if (first_bad.empty())
            first_bad = s;
    }
    ok(agree == M, "ds_scan and ds_convert agree on " + std::to_string(M) + " random texts" +
                       (first_bad.empty() ? "" : ": first difference '" + first_bad + "'"));

    /* 3. delimiters: random bytes (high bytes, NULs, 0xDC = 0x5C | 0x80)
     * and runs of delimiters long enough to fill every byte of the sums */
    long counted = 0;
    const long K = 100000;
    for (long t = 0; t < K; t++) {
        size_t n = t % 100 == 0 ? g() % 6000 : g() % 40;
        std::vector<char> v(n ? n : 1);
        for (size_t i = 0; i < n; i++) {
            int r = static_cast<int>(g() % 6);
            v[i] = r == 0 ? '\\' : r == 1 ? static_cast<char>(0x80 | g()) : r == 2 ? '\xdc'
                                          : r == 3 ? '\0' : static_cast<char>(g());
        }
        size_t ref = 0;
        for (size_t i = 0; i < n; i++)
            ref += v[i] == '\\';
        counted += ds_delimiters(v.data(), v.data() + n) == ref;
    }
    bool runs = true;
    for (size_t n : {0UL, 7UL, 8UL, 2039UL, 2040UL, 2041UL, 4080UL, 100000UL, 1000003UL}) {
        std::vector<char> v(n ? n : 1, '\\');
        runs = runs && ds_delimiters(v.data(), v.data() + n) == n;
    }
    ok(counted == K && runs, "ds_delimiters counts as a byte-by-byte count does");

    printf("1..%d\n", test_no);
    return failed ? 1 : 0;
}
