! read_table.f90 -- one row of a stacked variable of a sahaboltz table (format 2), with its
! coordinates and their units, read with the HDF5 Fortran library.
! Build: h5fc read_table.f90 -o read_table_f
! Run:   ./read_table_f first.h5 fraction species "Fe II"
! Fortran is column-major: the (rows, nT, nP) variable appears as (nP, nT, rows).
program read_table
  use hdf5
  use iso_c_binding
  implicit none
  integer, parameter :: text = 256
  character(len=text) :: fname, var, coord, label, tq, pq, units
  integer(hid_t) :: file
  integer(hsize_t) :: nt, np, i, j
  integer :: row, err
  logical :: thermal
  real(kind=8), allocatable :: t(:), p(:), v(:, :)

  call get_command_argument(1, fname)
  call get_command_argument(2, var)
  call get_command_argument(3, coord)
  call get_command_argument(4, label)
  call h5open_f(err)
  call h5fopen_f(trim(fname), H5F_ACC_RDONLY_F, file, err)
  if (err /= 0) stop 1
  ! the first axis: the temperature, or the quantity that replaces it (internal_energy with
  ! mass_density, entropy with gas_pressure)
  tq = 'temperature'
  call h5aexists_by_name_f(file, "/", "temperature_quantity", thermal, err)
  if (thermal) call text_attr("/", "temperature_quantity", tq)
  call text_attr("/", "pressure_quantity", pq)
  call axis(trim(tq), t, nt)
  call axis(trim(pq), p, np)
  row = find_row(trim(coord), trim(label))
  if (row < 0) stop 1
  call read_row(trim(var), row, v)

  call text_attr(trim(var), "units", units)
  write (*, '(2a)') 'units ', trim(units)
  call text_attr(trim(tq), "units", units)
  write (*, '(5a, i0)') 'axis ', trim(tq), ' ', trim(units), ' ', nt
  write (*, '(es26.17e3)') t
  call text_attr(trim(pq), "units", units)
  write (*, '(5a, i0)') 'axis ', trim(pq), ' ', trim(units), ' ', np
  write (*, '(es26.17e3)') p
  write (*, '(a, i0, a, i0)') 'values ', nt, ' ', np
  do i = 1, nt                 ! v(j, i) is (first axis(i), pressure(j))
     do j = 1, np
        write (*, '(es26.17e3)') v(j, i)
     end do
  end do
  call h5fclose_f(file, err)
  call h5close_f(err)

contains

  subroutine text_attr(obj, name, out)      ! a string attribute, blank-padded
    character(len=*), intent(in) :: obj, name
    character(len=text), intent(out) :: out
    integer(hid_t) :: attr, mtype
    integer(hsize_t) :: dims(1) = (/ 1 /)
    call h5aopen_by_name_f(file, obj, name, attr, err)
    call h5tcopy_f(H5T_FORTRAN_S1, mtype, err)
    call h5tset_size_f(mtype, int(text, size_t), err)
    out = ' '
    call h5aread_f(attr, mtype, out, dims, err)
    call h5tclose_f(mtype, err)
    call h5aclose_f(attr, err)
  end subroutine text_attr

  subroutine axis(name, values, n)          ! a 1-D coordinate of doubles
    character(len=*), intent(in) :: name
    real(kind=8), allocatable, intent(out) :: values(:)
    integer(hsize_t), intent(out) :: n
    integer(hid_t) :: dset, space
    integer(hsize_t) :: dims(1), maxdims(1)
    call h5dopen_f(file, name, dset, err)
    call h5dget_space_f(dset, space, err)
    call h5sget_simple_extent_dims_f(space, dims, maxdims, err)
    n = dims(1)
    allocate (values(n))
    call h5dread_f(dset, H5T_NATIVE_DOUBLE, values, dims, err)
    call h5sclose_f(space, err)
    call h5dclose_f(dset, err)
  end subroutine axis

  integer function find_row(name, want)     ! 0-based row of a label, -1 if absent
    character(len=*), intent(in) :: name, want   ! labels: variable-length C strings
    integer(hid_t) :: dset, space, ftype, mtype
    integer(hsize_t) :: dims(1), maxdims(1), k
    type(c_ptr), allocatable, target :: labels(:)
    type(c_ptr) :: buf
    character(len=text, kind=c_char), pointer :: s
    integer :: n
    call h5dopen_f(file, name, dset, err)
    call h5dget_space_f(dset, space, err)
    call h5sget_simple_extent_dims_f(space, dims, maxdims, err)
    allocate (labels(dims(1)))
    call h5dget_type_f(dset, ftype, err)             ! read them as stored (UTF-8)
    call h5tget_native_type_f(ftype, H5T_DIR_ASCEND_F, mtype, err)
    buf = c_loc(labels(1))
    call h5dread_f(dset, mtype, buf, err)
    find_row = -1
    do k = 1, dims(1)
       call c_f_pointer(labels(k), s)
       n = index(s, c_null_char) - 1
       if (s(1:n) == want) then
          find_row = int(k) - 1
          exit
       end if
    end do
    call h5dvlen_reclaim_f(mtype, space, H5P_DEFAULT_F, buf, err)
    call h5tclose_f(mtype, err)
    call h5tclose_f(ftype, err)
    call h5sclose_f(space, err)
    call h5dclose_f(dset, err)
  end function find_row

  subroutine read_row(name, r, out)         ! the hyperslab (:, :, r + 1) = one row
    character(len=*), intent(in) :: name
    integer, intent(in) :: r
    real(kind=8), allocatable, intent(out) :: out(:, :)
    integer(hid_t) :: dset, fspace, mspace
    integer(hsize_t) :: dims(3), maxdims(3), start(3), count(3), mdims(2)
    call h5dopen_f(file, name, dset, err)
    call h5dget_space_f(dset, fspace, err)
    call h5sget_simple_extent_dims_f(fspace, dims, maxdims, err)   ! (nP, nT, rows)
    start = (/ 0_hsize_t, 0_hsize_t, int(r, hsize_t) /)
    count = (/ dims(1), dims(2), 1_hsize_t /)
    call h5sselect_hyperslab_f(fspace, H5S_SELECT_SET_F, start, count, err)
    mdims = (/ dims(1), dims(2) /)
    call h5screate_simple_f(2, mdims, mspace, err)
    allocate (out(dims(1), dims(2)))
    call h5dread_f(dset, H5T_NATIVE_DOUBLE, out, mdims, err, mspace, fspace)
    if (err /= 0) stop 1                    ! e.g. a chunk whose checksum fails
    call h5sclose_f(mspace, err)
    call h5sclose_f(fspace, err)
    call h5dclose_f(dset, err)
  end subroutine read_row

end program read_table
