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
    double d = 0;
    std::from_chars_result r = std::from_chars(*b == '+' ? b + 1 : b, e, d);
    if (r.ec != std::errc() || r.ptr != e || !std::isfinite(d))
        return false;
    if (d != 0 && std::fabs(d) < DBL_MIN)
        return false; /* subnormal: strtod says ERANGE */
    out = d;
    return true;
}

/* The number of '\\' delimiters in [b, e), eight bytes at a time: counting
 * them byte by byte (to size a contour's points exactly before converting)
 * was a fifth of converting a dense structure set. A byte of x is zero
 * exactly where the text has a delimiter; ((x & 0x7f..) + 0x7f..) | x has
 * that byte's top bit clear exactly then, with no carry between bytes. */
inline size_t ds_delimiters(const char *b, const char *e)
{
    const uint64_t ones7 = 0x7f7f7f7f7f7f7f7fULL, delim = 0x5c5c5c5c5c5c5c5cULL;
    size_t n = 0;
    while (e - b >= 8) {
        uint64_t w;
        std::memcpy(&w, b, 8);
        uint64_t x = w ^ delim;
        uint64_t t = ((x & ones7) + ones7) | x;
        n += static_cast<size_t>(__builtin_popcountll(~t & ~ones7));
        b += 8;
    }
    for (; b < e; b++)
        n += *b == '\\';
    return n;
}

} // namespace sl_dicom_internal

#endif
