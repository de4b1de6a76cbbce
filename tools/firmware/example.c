/*
 * example.c - stream a simulated step response as livestep binary frames.
 *
 * Invented plant: a belt-driven positioning axis under a position loop that behaves
 * like a second-order system (natural frequency 50 rad/s, damping ratio 0.6), sampled
 * at 1 kHz, with a setpoint step from 0 to 50 mm after 100 samples. Three channels:
 * setpoint (mm), feedback (mm) and an estimated motor current (A, proportional to the
 * commanded acceleration). Device time is a 32-bit microsecond counter, which may be
 * started near its wrap to exercise the receiver.
 *
 * Build:  cc -std=c99 -Wall -Wextra -pedantic -O2 -o example example.c
 * Run:    ./example [frames [start_us [output]]]     (defaults: 2000, 0, stdout)
 * Decode: python -c "from livestep.decode.frames import FrameDecoder; ..."
 *
 * Output: one 0x00 (so the receiver starts on a frame boundary), a log frame, the
 * sample frames, with a second log frame just before the step sample.
 */
#include <stdio.h>
#include <stdlib.h>

#include "livestep_frame.h"

#define PERIOD_US 1000u      /* sample period */
#define SUBSTEPS 10          /* integration steps per sample */
#define STEP_AT 100L         /* sample index of the setpoint step */
#define STEP_MM 50.0         /* step size, mm */
#define WN 50.0              /* natural frequency, rad/s */
#define ZETA 0.6             /* damping ratio */
#define AMPS_PER_MMS2 2e-5   /* current estimate per commanded acceleration, A/(mm/s^2) */

static int emit(FILE *out, const uint8_t *frame, size_t n)
{
    return n > 0 && fwrite(frame, 1, n, out) == n;
}

int main(int argc, char **argv)
{
    long frames = argc > 1 ? strtol(argv[1], NULL, 10) : 2000L;
    uint32_t t_us = argc > 2 ? (uint32_t)strtoul(argv[2], NULL, 10) : 0u;
    FILE *out = stdout;
    livestep_link link = {0};
    uint8_t frame[LIVESTEP_MAX_WIRE];
    const uint8_t delimiter = 0x00u;
    const double h = (double)PERIOD_US * 1e-6 / SUBSTEPS; /* s */
    double x = 0.0; /* position, mm */
    double v = 0.0; /* velocity, mm/s */
    long k;
    int s;

    if (argc > 3) {
        out = fopen(argv[3], "wb");
        if (out == NULL) {
            perror(argv[3]);
            return 1;
        }
    }
    if (fwrite(&delimiter, 1, 1, out) != 1 ||
        !emit(out, frame, livestep_log_frame(&link, "boot: belt axis demo, 1 kHz", frame,
                                             sizeof frame))) {
        return 1;
    }
    for (k = 0; k < frames; ++k) {
        const double r = k >= STEP_AT ? STEP_MM : 0.0;
        double acc = WN * WN * (r - x) - 2.0 * ZETA * WN * v;
        float values[3];
        if (k == STEP_AT &&
            !emit(out, frame, livestep_log_frame(&link, "setpoint step 0 -> 50 mm", frame,
                                                 sizeof frame))) {
            return 1;
        }
        values[0] = (float)r;
        values[1] = (float)x;
        values[2] = (float)(acc * AMPS_PER_MMS2);
        if (!emit(out, frame, livestep_sample_frame(&link, t_us, values, 3u, frame,
                                                    sizeof frame))) {
            return 1;
        }
        for (s = 0; s < SUBSTEPS; ++s) { /* semi-implicit Euler */
            acc = WN * WN * (r - x) - 2.0 * ZETA * WN * v;
            v += acc * h;
            x += v * h;
        }
        t_us += PERIOD_US; /* wraps at 2^32 like the hardware counter */
    }
    if (out != stdout && fclose(out) != 0) {
        return 1;
    }
    return 0;
}
