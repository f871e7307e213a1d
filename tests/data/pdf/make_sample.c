/*
 * Writes sample.pdf, the test fixture of tests/reference/test_pdfdicom.py: a
 * one-page PDF drawn by cairo (Debian libcairo2-dev), invented text only.
 * Not part of the build; to make the file again:
 *   cc make_sample.c $(pkg-config --cflags --libs cairo) -o /tmp/make_sample && /tmp/make_sample
 */
#include <cairo-pdf.h>
#include <cairo.h>

int main(void)
{
    cairo_surface_t *s = cairo_pdf_surface_create("sample.pdf", 595.0, 842.0); /* A4, points */
    /* fixed dates, so the fixture is the same every time it is made */
    cairo_pdf_surface_set_metadata(s, CAIRO_PDF_METADATA_CREATE_DATE, "2026-12-01T09:00:00");
    cairo_pdf_surface_set_metadata(s, CAIRO_PDF_METADATA_TITLE, "strayline test fixture");
    cairo_t *cr = cairo_create(s);
    cairo_select_font_face(cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);
    cairo_set_font_size(cr, 14.0);
    cairo_move_to(cr, 72.0, 100.0);
    cairo_show_text(cr, "Invented test document, not for clinical use. DEMO-LENS-01");
    cairo_rectangle(cr, 72.0, 120.0, 200.0, 40.0);
    cairo_stroke(cr);
    cairo_destroy(cr);
    cairo_surface_destroy(s);
    return 0;
}
