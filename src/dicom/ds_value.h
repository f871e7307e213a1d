/*
 * The strict reading of one DICOM Decimal String value, shared by the C++
 * bridge files of src/dicom/ (internal: not a public header). A value must
 * match the PS3.5 6.2 grammar whole; it is converted where it lies, with no
 * copy and no allocation, because a structure set holds millions of them.
 */
#ifndef STRAYLINE_DICOM_DS_VALUE_H
#define STRAYLINE_DICOM_DS_VALUE_H

#include <cfloat>
#include <charconv>
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <cstring>
#include <system_error>

namespace sl_dicom_internal {

/* The number of a value [b, e) already matched against the DS grammar
 * (no spaces): std::from_chars is exact (correctly rounded, as strtod) and
 * needs no locale, copy or allocation. Out of range (overflow, or underflow
 * to zero or a subnormal) is refused as sl_parse_double refuses it. */
inline bool ds_number(const char *b, const char *e, double &out)
{
    double d = 0;
    std::from_chars_result r = std::from_chars(*b == '+' ? b + 1 : b, e, d);
    if (r.ec != std::errc() || r.ptr != e || !std::isfinite(d))
        return false;
    if (d != 0 && std::fabs(d) < DBL_MIN)
        return false; /* subnormal: strtod says ERANGE */
    out = d;
    return true;
}

/* One Decimal String value [b, e), checked against the DICOM grammar
 * (PS3.5 6.2: optional leading and trailing spaces, an optional sign, digits
 * with an optional decimal point, an optional exponent) and converted in
 * place. std::from_chars is exact (correctly rounded, as strtod) and
 * needs no locale, copy or allocation. Out of range (overflow, or underflow
 * to zero or a subnormal) is refused as sl_parse_double refuses it. */
inline bool ds_convert(const char *b, const char *e, double &out)
{
    while (b < e && *b == ' ')
        b++;
    while (e > b && e[-1] == ' ')
        e--;
    if (b == e)
        return false;
    const char *p = b;
    size_t digits = 0;
    if (*p == '+' || *p == '-')
        p++;
    while (p < e && *p >= '0' && *p <= '9')
        p++, digits++;
    if (p < e && *p == '.') {
        p++;
        while (p < e && *p >= '0' && *p <= '9')
            p++, digits++;
    }
    if (digits == 0)
        return false;
    if (p < e && (*p == 'e' || *p == 'E')) {
        p++;
        if (p < e && (*p == '+' || *p == '-'))
            p++;
        size_t ed = 0;
        while (p < e && *p >= '0' && *p <= '9')
            p++, ed++;
        if (ed == 0)
            return false;
    }
    if (p != e)
        return false;
    return ds_number(b, e, out);
}

/* The value that starts at b in a list of values ending at end: the same
 * grammar and number as ds_convert over [b, the next delimiter), found in
 * one pass instead of a search for the delimiter and a second pass over
 * the value. *next receives the delimiter (or end). False for anything
 * ds_convert refuses. */
inline bool ds_scan(const char *b, const char *end, const char **next, double &out)
{
    const char *p = b;
    while (p < end && *p == ' ')
        p++;
    const char *core = p;
    size_t digits = 0, frac = 0;
    uint64_t m = 0; /* the digits as an integer while they fit (at most 19) */
    bool neg = false, exact = true;
    if (p < end && (*p == '+' || *p == '-'))
        neg = *p++ == '-';
    while (p < end && *p >= '0' && *p <= '9')
        m = m * 10 + static_cast<uint64_t>(*p++ - '0'), digits++;
    if (p < end && *p == '.') {
        p++;
        while (p < end && *p >= '0' && *p <= '9')
            m = m * 10 + static_cast<uint64_t>(*p++ - '0'), digits++, frac++;
    }
    if (digits == 0)
        return false;
    if (p < end && (*p == 'e' || *p == 'E')) {
        exact = false;
        p++;
        if (p < end && (*p == '+' || *p == '-'))
            p++;
        size_t ed = 0;
        while (p < end && *p >= '0' && *p <= '9')
            p++, ed++;
        if (ed == 0)
            return false;
    }
    const char *core_end = p;
    while (p < end && *p == ' ')
        p++;
    if (p < end && *p != '\\')
        return false;
    *next = p;
    /* Contour coordinates are short decimals ("-123.456"): an integer of at
     * most 2^53 and a power of ten of at most 1e22 are both exact doubles,
     * so one IEEE division gives the correctly rounded quotient, the very
     * double from_chars gives (Clinger's fast path), without parsing the
     * text again. Anything else goes to from_chars. */
    static const double pow10[] = {1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,
                                   1e8,  1e9,  1e10, 1e11, 1e12, 1e13, 1e14, 1e15,
                                   1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22};
    if (exact && digits <= 19 && m <= (uint64_t(1) << 53) && frac <= 22) {
        double d = static_cast<double>(m) / pow10[frac];
        out = neg ? -d : d;
        return true;
    }
    return ds_number(core, core_end, out);
}

/* The number of '\\' delimiters in [b, e), eight bytes at a time: counting
 * them byte by byte (to size a contour's points exactly before converting)
 * was a fifth of converting a dense structure set. A byte of x is zero
 * exactly where the text has a delimiter; ((x & 0x7f..) + 0x7f..) | x has
 * that byte's top bit clear exactly then, with no carry between bytes. The
 * marks add up bytewise (at most 255 words a round, so no byte overflows)
 * and the eight byte sums are added once a round, without a popcount call. */
inline size_t ds_delimiters(const char *b, const char *e)
{
    const uint64_t ones7 = 0x7f7f7f7f7f7f7f7fULL, delim = 0x5c5c5c5c5c5c5c5cULL;
    const uint64_t lanes8 = 0x00ff00ff00ff00ffULL, sum16 = 0x0001000100010001ULL;
    size_t n = 0;
    while (e - b >= 8) {
        uint64_t acc = 0;
        for (int k = 0; k < 255 && e - b >= 8; k++, b += 8) {
            uint64_t w;
            std::memcpy(&w, b, 8);
            uint64_t x = w ^ delim;
            uint64_t t = ((x & ones7) + ones7) | x;
            acc += (~t & ~ones7) >> 7;
        }
        acc = (acc & lanes8) + ((acc >> 8) & lanes8);
        n += static_cast<size_t>((acc * sum16) >> 48);
    }
    for (; b < e; b++)
        n += *b == '\\';
    return n;
}

} // namespace sl_dicom_internal

#endif
