/* libhdf5's per-dataset minimum, the yardstick of `formfactory pack` in benches/hdf5.sh: each
 * file opened once, its root group iterated once, each dataset opened, its type and shape
 * asked, read whole in its own file type (no conversion), closed. Datasets larger than the
 * 512 KiB buffer are opened but not read.
 *   Build: cc -O2 benches/hdf5_minimum.c $(pkg-config --cflags --libs hdf5)
 *   Usage: a.out FILE...   (prints the number of datasets read)
 */
#include <hdf5.h>
#include <stdio.h>

static double buf[1 << 16];
static long n_read = 0;
static double checksum = 0.0;

static herr_t read_one(hid_t group, const char *name, const H5L_info_t *info, void *data) {
    (void)info;
    (void)data;
    hid_t d = H5Dopen2(group, name, H5P_DEFAULT);
    if (d < 0) {
        return 0; /* a group or another object: skipped */
    }
    hid_t t = H5Dget_type(d);
    hid_t s = H5Dget_space(d);
    hssize_t bytes = H5Sget_simple_extent_npoints(s) * (hssize_t)H5Tget_size(t);
    if (H5Sget_simple_extent_ndims(s) > 0 && bytes <= (hssize_t)sizeof buf &&
        H5Dread(d, t, H5S_ALL, H5S_ALL, H5P_DEFAULT, buf) >= 0) {
        checksum += buf[0];
        n_read++;
    }
    H5Sclose(s);
    H5Tclose(t);
    H5Dclose(d);
    return 0;
}

int main(int argc, char **argv) {
    for (int i = 1; i < argc; i++) {
        hid_t f = H5Fopen(argv[i], H5F_ACC_RDONLY, H5P_DEFAULT);
        if (f < 0) {
            fprintf(stderr, "cannot open %s\n", argv[i]);
            return 1;
        }
        H5Literate(f, H5_INDEX_NAME, H5_ITER_NATIVE, NULL, read_one, NULL);
        H5Fclose(f);
    }
    printf("%ld datasets (checksum %g)\n", n_read, checksum);
    return 0;
}
