/*
 * envtab -- a small command-line program over envtable.h (the envsample table loader).
 *
 *   envtab info TABLE.bin                  facts of a verified table
 *   envtab sample TABLE.bin inverse|alias  reads "u0 u1" lines, writes "cell x y z pdf" lines
 *   envtab pdf TABLE.bin                   reads "x y z" lines, writes "pdf" lines
 *
 * Numbers are written with 17 significant digits (they round-trip doubles).  Exit
 * status: 0 success, 2 a bad table or bad input (one line on stderr).
 * Build: cc -std=c99 -O2 -o envtab envtab.c -lm
 */
#define ENVTABLE_IMPLEMENTATION
#include "envtable.h"

#include <stdio.h>
#include <string.h>

static int usage(void) {
    fprintf(stderr, "usage: envtab info TABLE.bin | envtab sample TABLE.bin inverse|alias | envtab pdf TABLE.bin\n");
    return 2;
}

static int info(const envtab_table *t) {
    printf("table %ux%u cells, image %ux%u\n", t->width, t->height, t->image_width, t->image_height);
    printf("mapping %s, up %s, rotation %.17g deg\n", t->mapping == ENVTAB_EQUAL_AREA ? "equal-area" : "uv-linear",
           t->up == ENVTAB_UP_Y ? "y" : "z", t->rotation_deg);
    printf("methods%s%s%s%s\n", t->methods & ENVTAB_INVERSE ? " inverse" : "", t->methods & ENVTAB_ALIAS ? " alias" : "",
           t->flags & ENVTAB_HAS_RADIANCE ? ", radiance embedded" : "",
           t->flags & ENVTAB_MIS_ONLY ? ", valid only inside MIS" : "");
    return 0;
}

static int sample(const envtab_table *t, int method) {
    double u0, u1;
    envtab_sample_t s;
    long line = 0;
    while (scanf("%lf %lf", &u0, &u1) == 2) {
        line++;
        if (envtab_sample(t, method, u0, u1, &s) != 0) {
            fprintf(stderr, "error: the table does not hold this cell-choice method\n");
            return 2;
        }
        printf("%lld %.17g %.17g %.17g %.17g\n", (long long)s.cell, s.direction[0], s.direction[1], s.direction[2],
               s.pdf);
    }
    if (!feof(stdin)) {
        fprintf(stderr, "error: input line %ld is not two numbers\n", line + 1);
        return 2;
    }
    return 0;
}

static int pdf(const envtab_table *t) {
    double d[3];
    long line = 0;
    while (scanf("%lf %lf %lf", &d[0], &d[1], &d[2]) == 3) {
        line++;
        printf("%.17g\n", envtab_pdf(t, d));
    }
    if (!feof(stdin)) {
        fprintf(stderr, "error: input line %ld is not three numbers\n", line + 1);
        return 2;
    }
    return 0;
}

int main(int argc, char **argv) {
    if (argc < 3) return usage();
    envtab_table t;
    char err[512];
    if (envtab_open(argv[2], &t, 0, err, sizeof err) != 0) {
        fprintf(stderr, "error: %s\n", err);
        return 2;
    }
    int rc;
    if (strcmp(argv[1], "info") == 0 && argc == 3) rc = info(&t);
    else if (strcmp(argv[1], "sample") == 0 && argc == 4 && strcmp(argv[3], "inverse") == 0) rc = sample(&t, ENVTAB_INVERSE);
    else if (strcmp(argv[1], "sample") == 0 && argc == 4 && strcmp(argv[3], "alias") == 0) rc = sample(&t, ENVTAB_ALIAS);
    else if (strcmp(argv[1], "pdf") == 0 && argc == 3) rc = pdf(&t);
    else rc = usage();
    envtab_close(&t);
    return rc;
}
