/* Baseline for tests/bench/cpu-per-reading.sh: a libmodbus Modbus TCP client reading input registers 0-4
 * (the daemon's block) of units 1..N in turn, one request at a time, for SECONDS; prints
 * "requests=R errors=E cpu_us=C wall_s=W" with its own CPU time (all threads) from getrusage. */
#include <errno.h>
#include <modbus.h>
#include <stdio.h>
#include <stdlib.h>
#include <sys/resource.h>
#include <time.h>

static double now_s(void) {
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + (double)t.tv_nsec / 1e9;
}

static double cpu_us(void) {
    struct rusage u;
    getrusage(RUSAGE_SELF, &u);
    return (double)(u.ru_utime.tv_sec + u.ru_stime.tv_sec) * 1e6 + (double)(u.ru_utime.tv_usec + u.ru_stime.tv_usec);
}

int main(int argc, char **argv) {
    if (argc != 5) {
        fprintf(stderr, "usage: %s HOST PORT UNITS SECONDS\n", argv[0]);
        return 2;
    }
    int units = atoi(argv[3]);
    double seconds = atof(argv[4]);
    modbus_t *ctx = modbus_new_tcp(argv[1], atoi(argv[2]));
    if (ctx == NULL || modbus_connect(ctx) == -1) {
        fprintf(stderr, "connect: %s\n", modbus_strerror(errno));
        return 1;
    }
    uint16_t regs[5];
    long requests = 0, errors = 0;
    int unit = 1;
    double cpu0 = cpu_us(), t0 = now_s(), t = t0;
    while (t - t0 < seconds) {
        modbus_set_slave(ctx, unit);
        if (modbus_read_input_registers(ctx, 0, 5, regs) != 5) errors++;
        requests++;
        unit = unit % units + 1;
        if ((requests & 63) == 0) t = now_s();
    }
    t = now_s();
    printf("requests=%ld errors=%ld cpu_us=%.0f wall_s=%.3f\n", requests, errors, cpu_us() - cpu0, t - t0);
    modbus_close(ctx);
    modbus_free(ctx);
    return 0;
}
