//! How requests from Python are read: each is a dict with exactly the fields
//! of a Rust struct (`request!`), or a dict tagged by `"kind"` with exactly
//! the fields of one variant of a Rust enum (`tagged!`). A missing, unknown or
//! mistyped field is an `InvalidTypeError` that names the request and the
//! field (and the closest known name), raised before any work starts.
//! `python/mottle/_core.pyi` describes the same requests as TypedDicts.

use num_complex::Complex64;
use numpy::{PyReadonlyArray1, PyReadonlyArray2};
use pyo3::prelude::*;
use pyo3::types::PyDict;

use super::error::invalid_type;

/// `object` as a dict whose keys are all among `names` (`what` names the request in errors).
pub(crate) fn fields<'py>(
    object: &Bound<'py, PyAny>,
    what: &str,
    names: &[&str],
) -> PyResult<Bound<'py, PyDict>> {
    let py = object.py();
    let dict = object.cast::<PyDict>().map_err(|_| {
        invalid_type(
            py,
            format!(
                "{what} must be a dict with the fields {}, got {}",
                names.join(", "),
                type_name(object)
            ),
        )
    })?;
    for key in dict.keys() {
        let Ok(key) = key.extract::<String>() else {
            return Err(invalid_type(
                py,
                format!("{what} has a key that is not a string: {key}"),
            ));
        };
        if !names.contains(&key.as_str()) {
            return Err(invalid_type(
                py,
                format!(
                    "{what} has no field {key:?}{}; its fields are {}",
                    did_you_mean(&key, names),
                    names.join(", ")
                ),
            ));
        }
    }
    Ok(dict.clone())
}

/// Field `name` of a request dict, extracted as `T`.
pub(crate) fn field<'py, T>(dict: &Bound<'py, PyDict>, what: &str, name: &str) -> PyResult<T>
where
    T: FromPyObjectOwned<'py>,
{
    let py = dict.py();
    let value = dict
        .get_item(name)?
        .ok_or_else(|| invalid_type(py, format!("{what} lacks the field {name:?}")))?;
    value.extract::<T>().map_err(|error| {
        let error: PyErr = error.into();
        invalid_type(py, format!("{what} field {name:?}: {}", error.value(py)))
    })
}

/// The `"kind"` of a tagged request, one of `kinds`.
pub(crate) fn kind<'py>(
    object: &Bound<'py, PyAny>,
    what: &str,
    kinds: &[&str],
) -> PyResult<String> {
    let py = object.py();
    let dict = object.cast::<PyDict>().map_err(|_| {
        invalid_type(
            py,
            format!(
                "{what} must be a dict with a \"kind\" ({}), got {}",
                kinds.join(", "),
                type_name(object)
            ),
        )
    })?;
    let kind: String = field(dict, what, "kind")?;
    if kinds.contains(&kind.as_str()) {
        Ok(kind)
    } else {
        Err(invalid_type(
            py,
            format!(
                "{what} kind {kind:?} is unknown{}; the kinds are {}",
                did_you_mean(&kind, kinds),
                kinds.join(", ")
            ),
        ))
    }
}

fn type_name(object: &Bound<'_, PyAny>) -> String {
    object
        .get_type()
        .name()
        .map_or_else(|_| "an object".into(), |name| name.to_string())
}

/// "; did you mean \"x\"?" when a known name is within two edits of `name`.
fn did_you_mean(name: &str, known: &[&str]) -> String {
    known
        .iter()
        .map(|candidate| (edit_distance(name, candidate), candidate))
        .filter(|(distance, _)| *distance <= 2.max(name.len() / 4))
        .min()
        .map_or_else(String::new, |(_, candidate)| {
            format!(" (did you mean {candidate:?}?)")
        })
}

fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut previous = row[0];
        row[0] = i + 1;
        for (j, &cb) in b.iter().enumerate() {
            let substitution = previous + usize::from(ca != cb);
            previous = row[j + 1];
            row[j + 1] = substitution.min(row[j] + 1).min(previous + 1);
        }
    }
    row[b.len()]
}

/// A request struct: a dict with exactly these fields (`Option` ones may be None, never absent).
macro_rules! request {
    (
        $(#[$meta:meta])*
        $vis:vis struct $name:ident($what:literal) {
            $($(#[$field_meta:meta])* $field:ident: $type:ty),* $(,)?
        }
    ) => {
        $(#[$meta])*
        $vis struct $name {
            $($(#[$field_meta])* pub(crate) $field: $type),*
        }

        impl $name {
            pub(crate) const FIELDS: &'static [&'static str] = &[$(stringify!($field)),*];
        }

        impl<'a, 'py> pyo3::FromPyObject<'a, 'py> for $name {
            type Error = pyo3::PyErr;

            fn extract(object: pyo3::Borrowed<'a, 'py, pyo3::PyAny>) -> pyo3::PyResult<Self> {
                let dict = $crate::bindings::request::fields(&object, $what, Self::FIELDS)?;
                Ok($name {
                    $($field: $crate::bindings::request::field(&dict, $what, stringify!($field))?),*
                })
            }
        }
    };
}

/// An enum read from a dict tagged by `"kind"`: one variant per kind, each a
/// dict with `kind` and exactly its fields.
macro_rules! tagged {
    (
        $(#[$meta:meta])*
        $vis:vis enum $name:ident($what:literal) {
            $($tag:literal => $variant:ident { $($field:ident: $type:ty),* $(,)? }),+ $(,)?
        }
    ) => {
        $(#[$meta])*
        $vis enum $name {
            $($variant { $($field: $type),* }),+
        }

        impl $name {
            pub(crate) const KINDS: &'static [&'static str] = &[$($tag),+];
        }

        impl<'a, 'py> pyo3::FromPyObject<'a, 'py> for $name {
            type Error = pyo3::PyErr;

            fn extract(object: pyo3::Borrowed<'a, 'py, pyo3::PyAny>) -> pyo3::PyResult<Self> {
                use $crate::bindings::request::{field, fields, kind};
                let kind = kind(&object, $what, Self::KINDS)?;
                $(
                    if kind == $tag {
                        let what = concat!($what, " ", stringify!($tag));
                        let dict = fields(&object, what, &["kind", $(stringify!($field)),*])?;
                        return Ok($name::$variant { $($field: field(&dict, what, stringify!($field))?),* });
                    }
                )+
                unreachable!("kind() accepts only the listed kinds")
            }
        }
    };
}

pub(crate) use {request, tagged};

/// A 1-D complex array, copied (another Python thread could write it while we run detached).
pub(crate) struct ComplexVector(pub(crate) Vec<Complex64>);

impl<'a, 'py> FromPyObject<'a, 'py> for ComplexVector {
    type Error = PyErr;

    fn extract(object: Borrowed<'a, 'py, PyAny>) -> PyResult<Self> {
        let array: PyReadonlyArray1<'py, Complex64> = object.extract()?;
        Ok(ComplexVector(array.as_array().to_vec()))
    }
}

/// A 2-D complex array as rows, copied.
pub(crate) struct ComplexRows(pub(crate) Vec<Vec<Complex64>>);

impl<'a, 'py> FromPyObject<'a, 'py> for ComplexRows {
    type Error = PyErr;

    fn extract(object: Borrowed<'a, 'py, PyAny>) -> PyResult<Self> {
        let array: PyReadonlyArray2<'py, Complex64> = object.extract()?;
        Ok(ComplexRows(
            array
                .as_array()
                .outer_iter()
                .map(|row| row.to_vec())
                .collect(),
        ))
    }
}
