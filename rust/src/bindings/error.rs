//! mottle's exception classes, defined once here and re-exported by
//! `mottle.errors`: `MottleError`, `InvalidParameterError` (also a
//! `ValueError`) and `InvalidTypeError` (also a `TypeError`); and the mapping
//! of `CoreError` onto them.

use pyo3::exceptions::{PyException, PyKeyboardInterrupt, PyTypeError, PyValueError};
use pyo3::prelude::*;
use pyo3::sync::PyOnceLock;
use pyo3::types::{PyDict, PyTuple, PyType};

use crate::error::CoreError;

/// The public module the classes belong to (where users import them from).
const HOME: &str = "mottle.errors";

pyo3::create_exception!(
    mottle.errors,
    MottleError,
    PyException,
    "Base class of every exception mottle raises on purpose."
);

static INVALID_PARAMETER: PyOnceLock<Py<PyType>> = PyOnceLock::new();
static INVALID_TYPE: PyOnceLock<Py<PyType>> = PyOnceLock::new();

/// `class name(MottleError, builtin)`, made once per process.
fn subclass<'py>(
    py: Python<'py>,
    cell: &'static PyOnceLock<Py<PyType>>,
    name: &str,
    builtin: Bound<'py, PyType>,
    doc: &str,
) -> PyResult<Bound<'py, PyType>> {
    let class = cell.get_or_try_init(py, || {
        let namespace = PyDict::new(py);
        namespace.set_item("__doc__", doc)?;
        namespace.set_item("__module__", HOME)?;
        let bases = PyTuple::new(py, [py.get_type::<MottleError>(), builtin])?;
        let class = py.get_type::<PyType>().call1((name, bases, namespace))?;
        Ok::<_, PyErr>(class.cast_into::<PyType>()?.unbind())
    })?;
    Ok(class.bind(py).clone())
}

/// `InvalidParameterError`: a parameter has an impossible or unsupported value.
pub(crate) fn invalid_parameter_class(py: Python<'_>) -> PyResult<Bound<'_, PyType>> {
    subclass(
        py,
        &INVALID_PARAMETER,
        "InvalidParameterError",
        py.get_type::<PyValueError>(),
        "A parameter has an impossible or unsupported value.",
    )
}

/// `InvalidTypeError`: a parameter has the wrong type (or a request the wrong shape).
pub(crate) fn invalid_type_class(py: Python<'_>) -> PyResult<Bound<'_, PyType>> {
    subclass(
        py,
        &INVALID_TYPE,
        "InvalidTypeError",
        py.get_type::<PyTypeError>(),
        "A parameter has the wrong type.",
    )
}

fn raise(class: PyResult<Bound<'_, PyType>>, message: String) -> PyErr {
    match class {
        Ok(class) => PyErr::from_type(class, message),
        Err(error) => error,
    }
}

/// An `InvalidTypeError` with this message (a request of the wrong shape).
pub(crate) fn invalid_type(py: Python<'_>, message: String) -> PyErr {
    raise(invalid_type_class(py), message)
}

/// `CoreError` as a Python exception: input errors become `InvalidParameterError`,
/// interruption `KeyboardInterrupt`, bugs `MottleError`.
pub(crate) fn to_pyerr(py: Python<'_>, error: CoreError) -> PyErr {
    match error {
        CoreError::InvalidInput(message) => raise(invalid_parameter_class(py), message),
        CoreError::Interrupted => PyKeyboardInterrupt::new_err("interrupted"),
        internal @ CoreError::Internal(_) => MottleError::new_err(internal.to_string()),
    }
}

pub(crate) fn register(module: &Bound<'_, PyModule>) -> PyResult<()> {
    let py = module.py();
    module.add("MottleError", py.get_type::<MottleError>())?;
    module.add("InvalidParameterError", invalid_parameter_class(py)?)?;
    module.add("InvalidTypeError", invalid_type_class(py)?)?;
    Ok(())
}
