//! Vectors kept in tables: Parquet files and Arrow IPC files (`.arrow`, `.feather` version 2, and
//! the IPC stream format), one row an item, with the vectors in one column of lists of numbers
//! (list, large list or fixed-size list of float16/32/64 or integers) and the ids in a column
//! named `id` or `ids` (text or integers) beside them: vectors and ids in one row cannot fall out
//! of step. The vector column is the table's one list column, or the one `--vectors-key` names.
//! Only the two columns are read; record batches stream into the f32 matrix.

use std::path::Path;

use arrow_array::cast::AsArray;
use arrow_array::types::{
    Float16Type, Float32Type, Float64Type, Int16Type, Int32Type, Int64Type, Int8Type, UInt16Type,
    UInt32Type, UInt64Type, UInt8Type,
};
use arrow_array::{Array, RecordBatch};
use arrow_schema::{ArrowError, DataType, Schema};
use vitrine_map::matrix::Matrix;

use crate::error::InputError;
use crate::vectors::{check_ids, VectorFile, ID_ARRAYS};

/// Which columns hold the vectors and the ids.
struct Columns {
    vectors: usize,
    vector_name: String,
    ids: Option<usize>,
    id_name: Option<String>,
}

fn is_list(t: &DataType) -> bool {
    matches!(
        t,
        DataType::List(_) | DataType::LargeList(_) | DataType::FixedSizeList(_, _)
    )
}

fn choose(schema: &Schema, key: Option<&str>) -> Result<Columns, String> {
    let names: Vec<String> = schema
        .fields()
        .iter()
        .map(|f| format!("{} ({})", f.name(), f.data_type()))
        .collect();
    let vectors = match key {
        Some(k) => {
            let i = schema.index_of(k).map_err(|_| {
                format!(
                    "--vectors-key {k:?}: no such column (it has: {})",
                    names.join(", ")
                )
            })?;
            if !is_list(schema.field(i).data_type()) {
                return Err(format!(
                    "column {k:?} is {}, not a list of numbers (one vector a row)",
                    schema.field(i).data_type()
                ));
            }
            i
        }
        None => {
            let lists: Vec<usize> = (0..schema.fields().len())
                .filter(|&i| is_list(schema.field(i).data_type()))
                .collect();
            match lists.as_slice() {
                [one] => *one,
                [] => {
                    return Err(format!(
                        "has no column of lists of numbers, one vector a row (it has: {})",
                        names.join(", ")
                    ))
                }
                _ => {
                    return Err(format!(
                    "has several columns of lists ({}): name the vectors' one with --vectors-key",
                    lists
                        .iter()
                        .map(|&i| schema.field(i).name().as_str())
                        .collect::<Vec<_>>()
                        .join(", ")
                ))
                }
            }
        }
    };
    let ids = ID_ARRAYS.iter().find_map(|n| schema.index_of(n).ok());
    Ok(Columns {
        vectors,
        vector_name: schema.field(vectors).name().clone(),
        ids,
        id_name: ids.map(|i| schema.field(i).name().clone()),
    })
}

/// Appends one row's numbers as f32 (None: a type that is not numbers; Err: a missing value).
fn append(values: &dyn Array, out: &mut Vec<f32>) -> Result<Option<()>, ()> {
    if values.null_count() > 0 {
        return Err(());
    }
    macro_rules! prim {
        ($t:ty) => {
            out.extend(
                values
                    .as_primitive::<$t>()
                    .values()
                    .iter()
                    .map(|&v| v as f32),
            )
        };
    }
    match values.data_type() {
        DataType::Float16 => out.extend(
            values
                .as_primitive::<Float16Type>()
                .values()
                .iter()
                .map(|v| v.to_f32()),
        ),
        DataType::Float32 => out.extend_from_slice(values.as_primitive::<Float32Type>().values()),
        DataType::Float64 => prim!(Float64Type),
        DataType::Int8 => prim!(Int8Type),
        DataType::Int16 => prim!(Int16Type),
        DataType::Int32 => prim!(Int32Type),
        DataType::Int64 => prim!(Int64Type),
        DataType::UInt8 => prim!(UInt8Type),
        DataType::UInt16 => prim!(UInt16Type),
        DataType::UInt32 => prim!(UInt32Type),
        DataType::UInt64 => prim!(UInt64Type),
        _ => return Ok(None),
    }
    Ok(Some(()))
}

/// One row's id as text (None: a type ids cannot be; Err: a missing id).
fn id_of(a: &dyn Array, i: usize) -> Result<Option<String>, ()> {
    if a.is_null(i) {
        return Err(());
    }
    Ok(Some(match a.data_type() {
        DataType::Utf8 => a.as_string::<i32>().value(i).to_string(),
        DataType::LargeUtf8 => a.as_string::<i64>().value(i).to_string(),
        DataType::Utf8View => a.as_string_view().value(i).to_string(),
        DataType::Int32 => a.as_primitive::<Int32Type>().value(i).to_string(),
        DataType::Int64 => a.as_primitive::<Int64Type>().value(i).to_string(),
        DataType::UInt32 => a.as_primitive::<UInt32Type>().value(i).to_string(),
        DataType::UInt64 => a.as_primitive::<UInt64Type>().value(i).to_string(),
        _ => return Ok(None),
    }))
}

/// Streams `batches` (holding the chosen columns) into the matrix and the ids.
fn collect(
    cols: &Columns,
    batches: impl Iterator<Item = Result<RecordBatch, ArrowError>>,
) -> Result<(Matrix, Option<Vec<String>>), String> {
    let vname = &cols.vector_name;
    let mut data = Vec::new();
    let mut ids = cols.ids.map(|_| Vec::new());
    let mut width: Option<usize> = None;
    let mut row = 0usize;
    for batch in batches {
        let batch = batch.map_err(|e| format!("reading row {}: {e}", row + 1))?;
        let v = batch
            .column_by_name(vname)
            .ok_or_else(|| format!("a batch without the column {vname:?}"))?;
        let id_col = match &cols.id_name {
            Some(n) => Some(
                batch
                    .column_by_name(n)
                    .ok_or_else(|| format!("a batch without the column {n:?}"))?,
            ),
            None => None,
        };
        for i in 0..batch.num_rows() {
            row += 1;
            let which = || match (&ids, id_col) {
                (Some(_), Some(c)) => match id_of(c.as_ref(), i) {
                    Ok(Some(id)) => format!("row {row} (id {id})"),
                    _ => format!("row {row}"),
                },
                _ => format!("row {row}"),
            };
            if v.is_null(i) {
                return Err(format!("{}: column {vname:?} has no vector", which()));
            }
            let values = match v.data_type() {
                DataType::List(_) => v.as_list::<i32>().value(i),
                DataType::LargeList(_) => v.as_list::<i64>().value(i),
                DataType::FixedSizeList(_, _) => v.as_fixed_size_list().value(i),
                t => return Err(format!("column {vname:?} is {t}, not a list")),
            };
            let before = data.len();
            match append(values.as_ref(), &mut data) {
                Ok(Some(())) => {}
                Ok(None) => {
                    return Err(format!(
                        "column {vname:?} holds lists of {}, not of numbers",
                        values.data_type()
                    ))
                }
                Err(()) => {
                    return Err(format!(
                        "{}: a value of its vector is missing (null)",
                        which()
                    ))
                }
            }
            let n = data.len() - before;
            match width {
                None => width = Some(n),
                Some(w) if w != n => {
                    return Err(format!(
                        "{}: its vector has {n} values, the rows before it {w}",
                        which()
                    ))
                }
                _ => {}
            }
            if let (Some(list), Some(c)) = (ids.as_mut(), id_col) {
                match id_of(c.as_ref(), i) {
                    Ok(Some(id)) => list.push(id.trim().to_string()),
                    Ok(None) => {
                        return Err(format!(
                            "the id column is {}; ids are text or integers",
                            c.data_type()
                        ))
                    }
                    Err(()) => return Err(format!("row {row}: its id is missing")),
                }
            }
        }
    }
    let cols_n = width.unwrap_or(0);
    if row > 0 && cols_n == 0 {
        return Err(format!(
            "column {vname:?} holds empty lists: vectors of zero dimensions"
        ));
    }
    if let Some(list) = &ids {
        check_ids(list).map_err(|e| format!("the id column: {e}"))?;
    }
    Ok((
        Matrix {
            rows: row,
            cols: cols_n,
            data,
        },
        ids,
    ))
}

fn bad(path: &Path) -> impl Fn(String) -> InputError + '_ {
    move |reason| InputError::Vectors {
        file: path.display().to_string(),
        reason,
    }
}

/// The vectors (and ids) of a Parquet file.
pub fn read_parquet(path: &Path, key: Option<&str>) -> Result<VectorFile, InputError> {
    use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
    use parquet::arrow::ProjectionMask;
    let bad = bad(path);
    let file = std::fs::File::open(path).map_err(|e| InputError::io(path, e))?;
    let builder = ParquetRecordBatchReaderBuilder::try_new(file)
        .map_err(|e| bad(format!("not a Parquet file this build reads: {e}")))?;
    let cols = choose(builder.schema(), key).map_err(&bad)?;
    let mut wanted = vec![cols.vectors];
    wanted.extend(cols.ids);
    let mask = ProjectionMask::roots(builder.parquet_schema(), wanted.iter().copied());
    let reader = builder
        .with_projection(mask)
        .build()
        .map_err(|e| bad(e.to_string()))?;
    let (matrix, ids) = collect(&cols, reader).map_err(&bad)?;
    Ok(VectorFile {
        matrix,
        ids,
        array: Some(cols.vector_name),
    })
}

/// The vectors (and ids) of an Arrow IPC file or stream.
pub fn read_arrow(path: &Path, key: Option<&str>) -> Result<VectorFile, InputError> {
    use std::io::Read;
    let mut head = [0u8; 6];
    let is_file = std::fs::File::open(path)
        .and_then(|mut f| f.read_exact(&mut head))
        .is_ok()
        && &head == b"ARROW1";
    if is_file {
        read_ipc(path, key, |f, columns| {
            arrow_ipc::reader::FileReader::try_new(f, columns)
        })
    } else {
        read_ipc(path, key, |f, columns| {
            arrow_ipc::reader::StreamReader::try_new(f, columns)
        })
    }
}

/// An Arrow IPC reader opened twice by `open`: for its schema, then for the chosen columns only.
fn read_ipc<R: arrow_array::RecordBatchReader>(
    path: &Path,
    key: Option<&str>,
    open: impl Fn(std::io::BufReader<std::fs::File>, Option<Vec<usize>>) -> Result<R, ArrowError>,
) -> Result<VectorFile, InputError> {
    let bad = bad(path);
    let file = || {
        std::fs::File::open(path)
            .map(std::io::BufReader::new)
            .map_err(|e| InputError::io(path, e))
    };
    let not_arrow = |e: ArrowError| bad(format!("not an Arrow IPC file this build reads: {e}"));
    let cols = choose(&open(file()?, None).map_err(not_arrow)?.schema(), key).map_err(&bad)?;
    let mut wanted = vec![cols.vectors];
    wanted.extend(cols.ids);
    let reader = open(file()?, Some(wanted)).map_err(not_arrow)?;
    let (matrix, ids) = collect(&cols, reader).map_err(&bad)?;
    Ok(VectorFile {
        matrix,
        ids,
        array: Some(cols.vector_name),
    })
}
