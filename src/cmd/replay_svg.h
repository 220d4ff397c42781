/* replay_svg.h: inline SVG plot primitives for the replay report: a plot
 * box with data-to-pixel mapping (linear or log10 y), axes with ticks and
 * labels, and escaped text.  Private to src/cmd/replay*.c. */
#ifndef QW_REPLAY_SVG_H
#define QW_REPLAY_SVG_H

#include <stdio.h>

#define RP_SVG_W 960.0   /* px: plot width, fits a 1000 px page */
#define RP_SVG_ML 70.0   /* px: left margin (y tick labels) */
#define RP_SVG_MR 20.0   /* px: right margin */
#define RP_SVG_MT 16.0   /* px: top margin */
#define RP_SVG_MB 46.0   /* px: bottom margin (x ticks and label) */

struct rp_plot {
	FILE *f;
	double w, h;          /* px: whole SVG */
	double x0, x1, y0, y1; /* data range shown; y in log10 when logy */
	int logy;
};

/* x label for a tick at data value x. */
typedef void rp_tick_fn(const void *ctx, double x, char *buf, size_t cap);

/* Text with &, <, >, " and ' escaped for XML. */
void rp_xml_text(FILE *f, const char *s);
/* Opens <svg> of w x h px with role="img" and a <title>. */
void rp_svg_begin(struct rp_plot *pl, double h, const char *title);
void rp_svg_end(struct rp_plot *pl);
/* Data -> px; y is taken in data units (log10 applied here when logy). */
double rp_px(const struct rp_plot *pl, double x);
double rp_py(const struct rp_plot *pl, double y);
/* Frame, grid, ticks and axis labels.  xfmt NULL: numbers. */
void rp_svg_axes(const struct rp_plot *pl, const char *xlabel,
		 const char *ylabel, rp_tick_fn *xfmt, const void *ctx);

#endif
