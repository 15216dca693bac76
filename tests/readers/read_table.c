/* read_table.c -- one row of a stacked variable of a sahaboltz table (format 2), with its
   coordinates and their units, read with the plain HDF5 C library.
   Build: h5cc read_table.c -o read_table
     (or: cc read_table.c $(pkg-config --cflags --libs hdf5) -o read_table)
   Run:   ./read_table first.h5 fraction species "Fe II"                                  */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <hdf5.h>

#define TEXT 256

/* a string attribute of an object ("/" is the root group), NUL-terminated in out */
static void text_attr(hid_t file, const char *obj, const char *name, char out[TEXT])
{
    hid_t attr = H5Aopen_by_name(file, obj, name, H5P_DEFAULT, H5P_DEFAULT);
    hid_t type = H5Tcopy(H5T_C_S1);
    H5Tset_size(type, TEXT);
    H5Tset_strpad(type, H5T_STR_NULLTERM);
    memset(out, 0, TEXT);
    if (attr < 0 || H5Aread(attr, type, out) < 0) { fprintf(stderr, "no %s on %s\n", name, obj); exit(1); }
    H5Tclose(type);
    H5Aclose(attr);
}

/* a 1-D coordinate of doubles; its length in *n */
static double *axis(hid_t file, const char *name, hsize_t *n)
{
    hid_t d = H5Dopen2(file, name, H5P_DEFAULT);
    hid_t s = H5Dget_space(d);
    H5Sget_simple_extent_dims(s, n, NULL);
    double *v = malloc(*n * sizeof *v);
    H5Dread(d, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT, v);
    H5Sclose(s);
    H5Dclose(d);
    return v;
}

/* the row of a label ("Fe II") in a string coordinate ("species"), -1 if absent;
   the labels are variable-length strings, netCDF-4's string type */
static long find_row(hid_t file, const char *coord, const char *label)
{
    hid_t d = H5Dopen2(file, coord, H5P_DEFAULT);
    hid_t s = H5Dget_space(d);
    hsize_t n;
    H5Sget_simple_extent_dims(s, &n, NULL);
    hid_t ftype = H5Dget_type(d);                 /* read them as stored (UTF-8) */
    hid_t type = H5Tget_native_type(ftype, H5T_DIR_DEFAULT);
    char **names = malloc(n * sizeof *names);
    H5Dread(d, type, H5S_ALL, H5S_ALL, H5P_DEFAULT, names);
    long row = -1;
    for (hsize_t k = 0; k < n && row < 0; k++)
        if (strcmp(names[k], label) == 0) row = (long)k;
    H5Dvlen_reclaim(type, s, H5P_DEFAULT, names);
    free(names);
    H5Tclose(type);
    H5Tclose(ftype);
    H5Sclose(s);
    H5Dclose(d);
    return row;
}

int main(int argc, char **argv)
{
    if (argc != 5) { fprintf(stderr, "usage: %s FILE VARIABLE COORDINATE LABEL\n", argv[0]); return 2; }
    hid_t file = H5Fopen(argv[1], H5F_ACC_RDONLY, H5P_DEFAULT);
    if (file < 0) return 1;
    char tq[TEXT] = "temperature", pq[TEXT], units[TEXT];
    /* the first axis: the temperature, or the quantity that replaces it (internal_energy
       with mass_density, entropy with gas_pressure) */
    if (H5Aexists_by_name(file, "/", "temperature_quantity", H5P_DEFAULT) > 0)
        text_attr(file, "/", "temperature_quantity", tq);
    text_attr(file, "/", "pressure_quantity", pq);     /* name of the pressure-like axis */
    hsize_t nt, np;
    double *t = axis(file, tq, &nt);
    double *p = axis(file, pq, &np);
    long row = find_row(file, argv[3], argv[4]);
    if (row < 0) { fprintf(stderr, "%s has no %s\n", argv[3], argv[4]); return 1; }

    /* the variable is (rows, nT, nP) in C order: read the hyperslab [row, :, :] */
    hid_t d = H5Dopen2(file, argv[2], H5P_DEFAULT);
    hid_t fs = H5Dget_space(d);
    hsize_t start[3] = {(hsize_t)row, 0, 0}, count[3] = {1, nt, np}, mdims[2] = {nt, np};
    H5Sselect_hyperslab(fs, H5S_SELECT_SET, start, NULL, count, NULL);
    hid_t ms = H5Screate_simple(2, mdims, NULL);
    double *v = malloc(nt * np * sizeof *v);
    if (H5Dread(d, H5T_NATIVE_DOUBLE, ms, fs, H5P_DEFAULT, v) < 0) return 1;  /* checksums */

    text_attr(file, argv[2], "units", units);
    printf("units %s\n", units);
    text_attr(file, tq, "units", units);
    printf("axis %s %s %llu\n", tq, units, (unsigned long long)nt);
    for (hsize_t i = 0; i < nt; i++) printf("%.17g\n", t[i]);
    text_attr(file, pq, "units", units);
    printf("axis %s %s %llu\n", pq, units, (unsigned long long)np);
    for (hsize_t j = 0; j < np; j++) printf("%.17g\n", p[j]);
    printf("values %llu %llu\n", (unsigned long long)nt, (unsigned long long)np);
    for (hsize_t i = 0; i < nt; i++)          /* v[i * nP + j] is (first axis[i], pressure[j]) */
        for (hsize_t j = 0; j < np; j++) printf("%.17g\n", v[i * np + j]);

    free(t); free(p); free(v);
    H5Sclose(ms); H5Sclose(fs); H5Dclose(d); H5Fclose(file);
    return 0;
}
