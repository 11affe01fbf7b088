from google.protobuf import duration_pb2 as _duration_pb2
from google.protobuf.internal import containers as _containers
from google.protobuf.internal import enum_type_wrapper as _enum_type_wrapper
from google.protobuf import descriptor as _descriptor
from google.protobuf import message as _message
from typing import ClassVar as _ClassVar, Iterable as _Iterable, Mapping as _Mapping, Optional as _Optional, Union as _Union

CSR_RAW: MatrixEncoding
DESCRIPTOR: _descriptor.FileDescriptor
DONE: JobState
JOB_STATE_UNSPECIFIED: JobState
MATRIX_ENCODING_UNSPECIFIED: MatrixEncoding
MATRIX_MARKET: MatrixEncoding
QUEUED: JobState
RUNNING: JobState

class AMGOptions(_message.Message):
    __slots__ = ["block_size", "degree", "smoother", "theta"]
    BLOCK_SIZE_FIELD_NUMBER: _ClassVar[int]
    DEGREE_FIELD_NUMBER: _ClassVar[int]
    SMOOTHER_FIELD_NUMBER: _ClassVar[int]
    THETA_FIELD_NUMBER: _ClassVar[int]
    block_size: int
    degree: int
    smoother: str
    theta: float
    def __init__(self, theta: _Optional[float] = ..., smoother: _Optional[str] = ..., degree: _Optional[int] = ..., block_size: _Optional[int] = ...) -> None: ...

class Accepted(_message.Message):
    __slots__ = ["detached", "from_cache", "matrix_id", "max_iter_ceiling", "method", "preconditioner", "preconditioner_bytes", "preconditioner_reason", "rhs_count", "setup_seconds", "shift", "time_ceiling_seconds", "tries"]
    DETACHED_FIELD_NUMBER: _ClassVar[int]
    FROM_CACHE_FIELD_NUMBER: _ClassVar[int]
    MATRIX_ID_FIELD_NUMBER: _ClassVar[int]
    MAX_ITER_CEILING_FIELD_NUMBER: _ClassVar[int]
    METHOD_FIELD_NUMBER: _ClassVar[int]
    PRECONDITIONER_BYTES_FIELD_NUMBER: _ClassVar[int]
    PRECONDITIONER_FIELD_NUMBER: _ClassVar[int]
    PRECONDITIONER_REASON_FIELD_NUMBER: _ClassVar[int]
    RHS_COUNT_FIELD_NUMBER: _ClassVar[int]
    SETUP_SECONDS_FIELD_NUMBER: _ClassVar[int]
    SHIFT_FIELD_NUMBER: _ClassVar[int]
    TIME_CEILING_SECONDS_FIELD_NUMBER: _ClassVar[int]
    TRIES_FIELD_NUMBER: _ClassVar[int]
    detached: bool
    from_cache: bool
    matrix_id: str
    max_iter_ceiling: int
    method: str
    preconditioner: str
    preconditioner_bytes: int
    preconditioner_reason: str
    rhs_count: int
    setup_seconds: float
    shift: float
    time_ceiling_seconds: float
    tries: int
    def __init__(self, matrix_id: _Optional[str] = ..., method: _Optional[str] = ..., preconditioner: _Optional[str] = ..., preconditioner_reason: _Optional[str] = ..., shift: _Optional[float] = ..., tries: _Optional[int] = ..., from_cache: bool = ..., setup_seconds: _Optional[float] = ..., preconditioner_bytes: _Optional[int] = ..., rhs_count: _Optional[int] = ..., detached: bool = ..., max_iter_ceiling: _Optional[int] = ..., time_ceiling_seconds: _Optional[float] = ...) -> None: ...

class CancelJobRequest(_message.Message):
    __slots__ = ["job_id"]
    JOB_ID_FIELD_NUMBER: _ClassVar[int]
    job_id: str
    def __init__(self, job_id: _Optional[str] = ...) -> None: ...

class DeleteMatrixRequest(_message.Message):
    __slots__ = ["id"]
    ID_FIELD_NUMBER: _ClassVar[int]
    id: str
    def __init__(self, id: _Optional[str] = ...) -> None: ...

class DeleteMatrixResponse(_message.Message):
    __slots__ = ["freed_bytes"]
    FREED_BYTES_FIELD_NUMBER: _ClassVar[int]
    freed_bytes: int
    def __init__(self, freed_bytes: _Optional[int] = ...) -> None: ...

class DownloadSolutionRequest(_message.Message):
    __slots__ = ["chunk_entries", "job_id", "rhs"]
    CHUNK_ENTRIES_FIELD_NUMBER: _ClassVar[int]
    JOB_ID_FIELD_NUMBER: _ClassVar[int]
    RHS_FIELD_NUMBER: _ClassVar[int]
    chunk_entries: int
    job_id: str
    rhs: int
    def __init__(self, job_id: _Optional[str] = ..., rhs: _Optional[int] = ..., chunk_entries: _Optional[int] = ...) -> None: ...

class Finished(_message.Message):
    __slots__ = ["dropped_progress", "elapsed_seconds", "error", "outcome", "state"]
    DROPPED_PROGRESS_FIELD_NUMBER: _ClassVar[int]
    ELAPSED_SECONDS_FIELD_NUMBER: _ClassVar[int]
    ERROR_FIELD_NUMBER: _ClassVar[int]
    OUTCOME_FIELD_NUMBER: _ClassVar[int]
    STATE_FIELD_NUMBER: _ClassVar[int]
    dropped_progress: int
    elapsed_seconds: float
    error: str
    outcome: str
    state: JobState
    def __init__(self, state: _Optional[_Union[JobState, str]] = ..., outcome: _Optional[str] = ..., error: _Optional[str] = ..., dropped_progress: _Optional[int] = ..., elapsed_seconds: _Optional[float] = ...) -> None: ...

class GetHistoryRequest(_message.Message):
    __slots__ = ["job_id", "rhs"]
    JOB_ID_FIELD_NUMBER: _ClassVar[int]
    RHS_FIELD_NUMBER: _ClassVar[int]
    job_id: str
    rhs: int
    def __init__(self, job_id: _Optional[str] = ..., rhs: _Optional[int] = ...) -> None: ...

class GetJobRequest(_message.Message):
    __slots__ = ["job_id"]
    JOB_ID_FIELD_NUMBER: _ClassVar[int]
    job_id: str
    def __init__(self, job_id: _Optional[str] = ...) -> None: ...

class GetMatrixRequest(_message.Message):
    __slots__ = ["id"]
    ID_FIELD_NUMBER: _ClassVar[int]
    id: str
    def __init__(self, id: _Optional[str] = ...) -> None: ...

class History(_message.Message):
    __slots__ = ["job_id", "least_squares", "recorded", "rhs", "rows", "thinned"]
    JOB_ID_FIELD_NUMBER: _ClassVar[int]
    LEAST_SQUARES_FIELD_NUMBER: _ClassVar[int]
    RECORDED_FIELD_NUMBER: _ClassVar[int]
    RHS_FIELD_NUMBER: _ClassVar[int]
    ROWS_FIELD_NUMBER: _ClassVar[int]
    THINNED_FIELD_NUMBER: _ClassVar[int]
    job_id: str
    least_squares: bool
    recorded: int
    rhs: int
    rows: _containers.RepeatedCompositeFieldContainer[Progress]
    thinned: bool
    def __init__(self, job_id: _Optional[str] = ..., rhs: _Optional[int] = ..., rows: _Optional[_Iterable[_Union[Progress, _Mapping]]] = ..., thinned: bool = ..., recorded: _Optional[int] = ..., least_squares: bool = ...) -> None: ...

class Job(_message.Message):
    __slots__ = ["cols", "created_unix", "detached", "error", "finished_unix", "id", "label", "last_progress", "matrix_id", "matrix_name", "method", "nonzeros", "outcome", "preconditioner", "preconditioner_requested", "results", "rhs_count", "rhs_done", "rows", "rtol", "solution_kept", "started_unix", "state"]
    COLS_FIELD_NUMBER: _ClassVar[int]
    CREATED_UNIX_FIELD_NUMBER: _ClassVar[int]
    DETACHED_FIELD_NUMBER: _ClassVar[int]
    ERROR_FIELD_NUMBER: _ClassVar[int]
    FINISHED_UNIX_FIELD_NUMBER: _ClassVar[int]
    ID_FIELD_NUMBER: _ClassVar[int]
    LABEL_FIELD_NUMBER: _ClassVar[int]
    LAST_PROGRESS_FIELD_NUMBER: _ClassVar[int]
    MATRIX_ID_FIELD_NUMBER: _ClassVar[int]
    MATRIX_NAME_FIELD_NUMBER: _ClassVar[int]
    METHOD_FIELD_NUMBER: _ClassVar[int]
    NONZEROS_FIELD_NUMBER: _ClassVar[int]
    OUTCOME_FIELD_NUMBER: _ClassVar[int]
    PRECONDITIONER_FIELD_NUMBER: _ClassVar[int]
    PRECONDITIONER_REQUESTED_FIELD_NUMBER: _ClassVar[int]
    RESULTS_FIELD_NUMBER: _ClassVar[int]
    RHS_COUNT_FIELD_NUMBER: _ClassVar[int]
    RHS_DONE_FIELD_NUMBER: _ClassVar[int]
    ROWS_FIELD_NUMBER: _ClassVar[int]
    RTOL_FIELD_NUMBER: _ClassVar[int]
    SOLUTION_KEPT_FIELD_NUMBER: _ClassVar[int]
    STARTED_UNIX_FIELD_NUMBER: _ClassVar[int]
    STATE_FIELD_NUMBER: _ClassVar[int]
    cols: int
    created_unix: float
    detached: bool
    error: str
    finished_unix: float
    id: str
    label: str
    last_progress: Progress
    matrix_id: str
    matrix_name: str
    method: str
    nonzeros: int
    outcome: str
    preconditioner: str
    preconditioner_requested: str
    results: _containers.RepeatedCompositeFieldContainer[SolveResult]
    rhs_count: int
    rhs_done: int
    rows: int
    rtol: float
    solution_kept: bool
    started_unix: float
    state: JobState
    def __init__(self, id: _Optional[str] = ..., state: _Optional[_Union[JobState, str]] = ..., outcome: _Optional[str] = ..., matrix_id: _Optional[str] = ..., matrix_name: _Optional[str] = ..., rows: _Optional[int] = ..., cols: _Optional[int] = ..., nonzeros: _Optional[int] = ..., method: _Optional[str] = ..., preconditioner_requested: _Optional[str] = ..., preconditioner: _Optional[str] = ..., rhs_count: _Optional[int] = ..., rhs_done: _Optional[int] = ..., detached: bool = ..., label: _Optional[str] = ..., last_progress: _Optional[_Union[Progress, _Mapping]] = ..., results: _Optional[_Iterable[_Union[SolveResult, _Mapping]]] = ..., error: _Optional[str] = ..., created_unix: _Optional[float] = ..., started_unix: _Optional[float] = ..., finished_unix: _Optional[float] = ..., solution_kept: bool = ..., rtol: _Optional[float] = ...) -> None: ...

class JobEvent(_message.Message):
    __slots__ = ["accepted", "finished", "job_id", "progress", "queued", "result", "seq", "solution"]
    ACCEPTED_FIELD_NUMBER: _ClassVar[int]
    FINISHED_FIELD_NUMBER: _ClassVar[int]
    JOB_ID_FIELD_NUMBER: _ClassVar[int]
    PROGRESS_FIELD_NUMBER: _ClassVar[int]
    QUEUED_FIELD_NUMBER: _ClassVar[int]
    RESULT_FIELD_NUMBER: _ClassVar[int]
    SEQ_FIELD_NUMBER: _ClassVar[int]
    SOLUTION_FIELD_NUMBER: _ClassVar[int]
    accepted: Accepted
    finished: Finished
    job_id: str
    progress: Progress
    queued: Queued
    result: SolveResult
    seq: int
    solution: VectorChunk
    def __init__(self, seq: _Optional[int] = ..., job_id: _Optional[str] = ..., queued: _Optional[_Union[Queued, _Mapping]] = ..., accepted: _Optional[_Union[Accepted, _Mapping]] = ..., progress: _Optional[_Union[Progress, _Mapping]] = ..., result: _Optional[_Union[SolveResult, _Mapping]] = ..., solution: _Optional[_Union[VectorChunk, _Mapping]] = ..., finished: _Optional[_Union[Finished, _Mapping]] = ...) -> None: ...

class ListJobsRequest(_message.Message):
    __slots__ = []
    def __init__(self) -> None: ...

class ListJobsResponse(_message.Message):
    __slots__ = ["jobs"]
    JOBS_FIELD_NUMBER: _ClassVar[int]
    jobs: _containers.RepeatedCompositeFieldContainer[Job]
    def __init__(self, jobs: _Optional[_Iterable[_Union[Job, _Mapping]]] = ...) -> None: ...

class ListMatricesRequest(_message.Message):
    __slots__ = []
    def __init__(self) -> None: ...

class ListMatricesResponse(_message.Message):
    __slots__ = ["matrices"]
    MATRICES_FIELD_NUMBER: _ClassVar[int]
    matrices: _containers.RepeatedCompositeFieldContainer[Matrix]
    def __init__(self, matrices: _Optional[_Iterable[_Union[Matrix, _Mapping]]] = ...) -> None: ...

class Matrix(_message.Message):
    __slots__ = ["already_stored", "bytes", "cols", "id", "inspect_json", "jobs_using", "name", "nonzeros", "rows", "symmetry", "upload_bytes", "upload_seconds"]
    ALREADY_STORED_FIELD_NUMBER: _ClassVar[int]
    BYTES_FIELD_NUMBER: _ClassVar[int]
    COLS_FIELD_NUMBER: _ClassVar[int]
    ID_FIELD_NUMBER: _ClassVar[int]
    INSPECT_JSON_FIELD_NUMBER: _ClassVar[int]
    JOBS_USING_FIELD_NUMBER: _ClassVar[int]
    NAME_FIELD_NUMBER: _ClassVar[int]
    NONZEROS_FIELD_NUMBER: _ClassVar[int]
    ROWS_FIELD_NUMBER: _ClassVar[int]
    SYMMETRY_FIELD_NUMBER: _ClassVar[int]
    UPLOAD_BYTES_FIELD_NUMBER: _ClassVar[int]
    UPLOAD_SECONDS_FIELD_NUMBER: _ClassVar[int]
    already_stored: bool
    bytes: int
    cols: int
    id: str
    inspect_json: str
    jobs_using: int
    name: str
    nonzeros: int
    rows: int
    symmetry: str
    upload_bytes: int
    upload_seconds: float
    def __init__(self, id: _Optional[str] = ..., name: _Optional[str] = ..., rows: _Optional[int] = ..., cols: _Optional[int] = ..., nonzeros: _Optional[int] = ..., symmetry: _Optional[str] = ..., bytes: _Optional[int] = ..., inspect_json: _Optional[str] = ..., already_stored: bool = ..., upload_seconds: _Optional[float] = ..., upload_bytes: _Optional[int] = ..., jobs_using: _Optional[int] = ...) -> None: ...

class MultigridLevel(_message.Message):
    __slots__ = ["lambda_max", "nnz", "omega", "rows", "theta"]
    LAMBDA_MAX_FIELD_NUMBER: _ClassVar[int]
    NNZ_FIELD_NUMBER: _ClassVar[int]
    OMEGA_FIELD_NUMBER: _ClassVar[int]
    ROWS_FIELD_NUMBER: _ClassVar[int]
    THETA_FIELD_NUMBER: _ClassVar[int]
    lambda_max: float
    nnz: int
    omega: float
    rows: int
    theta: float
    def __init__(self, rows: _Optional[int] = ..., nnz: _Optional[int] = ..., theta: _Optional[float] = ..., omega: _Optional[float] = ..., lambda_max: _Optional[float] = ...) -> None: ...

class MultigridReport(_message.Message):
    __slots__ = ["apply_spmvs", "bytes", "coarsest", "degree", "grid_complexity", "levels", "near_null_vectors", "operator_complexity", "setup_seconds", "setup_spmvs", "smoother", "theta"]
    APPLY_SPMVS_FIELD_NUMBER: _ClassVar[int]
    BYTES_FIELD_NUMBER: _ClassVar[int]
    COARSEST_FIELD_NUMBER: _ClassVar[int]
    DEGREE_FIELD_NUMBER: _ClassVar[int]
    GRID_COMPLEXITY_FIELD_NUMBER: _ClassVar[int]
    LEVELS_FIELD_NUMBER: _ClassVar[int]
    NEAR_NULL_VECTORS_FIELD_NUMBER: _ClassVar[int]
    OPERATOR_COMPLEXITY_FIELD_NUMBER: _ClassVar[int]
    SETUP_SECONDS_FIELD_NUMBER: _ClassVar[int]
    SETUP_SPMVS_FIELD_NUMBER: _ClassVar[int]
    SMOOTHER_FIELD_NUMBER: _ClassVar[int]
    THETA_FIELD_NUMBER: _ClassVar[int]
    apply_spmvs: float
    bytes: int
    coarsest: str
    degree: int
    grid_complexity: float
    levels: _containers.RepeatedCompositeFieldContainer[MultigridLevel]
    near_null_vectors: int
    operator_complexity: float
    setup_seconds: float
    setup_spmvs: float
    smoother: str
    theta: float
    def __init__(self, smoother: _Optional[str] = ..., degree: _Optional[int] = ..., theta: _Optional[float] = ..., near_null_vectors: _Optional[int] = ..., levels: _Optional[_Iterable[_Union[MultigridLevel, _Mapping]]] = ..., coarsest: _Optional[str] = ..., operator_complexity: _Optional[float] = ..., grid_complexity: _Optional[float] = ..., setup_seconds: _Optional[float] = ..., setup_spmvs: _Optional[float] = ..., apply_spmvs: _Optional[float] = ..., bytes: _Optional[int] = ...) -> None: ...

class Progress(_message.Message):
    __slots__ = ["elapsed_seconds", "iteration", "normal_residual_norm", "relative_residual", "residual_norm", "rhs"]
    ELAPSED_SECONDS_FIELD_NUMBER: _ClassVar[int]
    ITERATION_FIELD_NUMBER: _ClassVar[int]
    NORMAL_RESIDUAL_NORM_FIELD_NUMBER: _ClassVar[int]
    RELATIVE_RESIDUAL_FIELD_NUMBER: _ClassVar[int]
    RESIDUAL_NORM_FIELD_NUMBER: _ClassVar[int]
    RHS_FIELD_NUMBER: _ClassVar[int]
    elapsed_seconds: float
    iteration: int
    normal_residual_norm: float
    relative_residual: float
    residual_norm: float
    rhs: int
    def __init__(self, rhs: _Optional[int] = ..., iteration: _Optional[int] = ..., elapsed_seconds: _Optional[float] = ..., residual_norm: _Optional[float] = ..., relative_residual: _Optional[float] = ..., normal_residual_norm: _Optional[float] = ...) -> None: ...

class ProgressPolicy(_message.Message):
    __slots__ = ["every_iterations", "interval"]
    EVERY_ITERATIONS_FIELD_NUMBER: _ClassVar[int]
    INTERVAL_FIELD_NUMBER: _ClassVar[int]
    every_iterations: int
    interval: _duration_pb2.Duration
    def __init__(self, every_iterations: _Optional[int] = ..., interval: _Optional[_Union[_duration_pb2.Duration, _Mapping]] = ...) -> None: ...

class Queued(_message.Message):
    __slots__ = ["position"]
    POSITION_FIELD_NUMBER: _ClassVar[int]
    position: int
    def __init__(self, position: _Optional[int] = ...) -> None: ...

class Settings(_message.Message):
    __slots__ = ["atol", "btol", "damp", "max_iter", "refresh_every", "rtol", "time_limit_seconds"]
    ATOL_FIELD_NUMBER: _ClassVar[int]
    BTOL_FIELD_NUMBER: _ClassVar[int]
    DAMP_FIELD_NUMBER: _ClassVar[int]
    MAX_ITER_FIELD_NUMBER: _ClassVar[int]
    REFRESH_EVERY_FIELD_NUMBER: _ClassVar[int]
    RTOL_FIELD_NUMBER: _ClassVar[int]
    TIME_LIMIT_SECONDS_FIELD_NUMBER: _ClassVar[int]
    atol: float
    btol: float
    damp: float
    max_iter: int
    refresh_every: int
    rtol: float
    time_limit_seconds: float
    def __init__(self, rtol: _Optional[float] = ..., atol: _Optional[float] = ..., max_iter: _Optional[int] = ..., time_limit_seconds: _Optional[float] = ..., refresh_every: _Optional[int] = ..., btol: _Optional[float] = ..., damp: _Optional[float] = ...) -> None: ...

class SolveRequest(_message.Message):
    __slots__ = ["amg", "atol", "btol", "damp", "detach", "keep_solution", "label", "least_squares", "matrix_id", "max_iter", "method", "preconditioner", "progress", "refresh_every", "reg", "rhs", "rtol", "time_limit", "weights", "x0"]
    AMG_FIELD_NUMBER: _ClassVar[int]
    ATOL_FIELD_NUMBER: _ClassVar[int]
    BTOL_FIELD_NUMBER: _ClassVar[int]
    DAMP_FIELD_NUMBER: _ClassVar[int]
    DETACH_FIELD_NUMBER: _ClassVar[int]
    KEEP_SOLUTION_FIELD_NUMBER: _ClassVar[int]
    LABEL_FIELD_NUMBER: _ClassVar[int]
    LEAST_SQUARES_FIELD_NUMBER: _ClassVar[int]
    MATRIX_ID_FIELD_NUMBER: _ClassVar[int]
    MAX_ITER_FIELD_NUMBER: _ClassVar[int]
    METHOD_FIELD_NUMBER: _ClassVar[int]
    PRECONDITIONER_FIELD_NUMBER: _ClassVar[int]
    PROGRESS_FIELD_NUMBER: _ClassVar[int]
    REFRESH_EVERY_FIELD_NUMBER: _ClassVar[int]
    REG_FIELD_NUMBER: _ClassVar[int]
    RHS_FIELD_NUMBER: _ClassVar[int]
    RTOL_FIELD_NUMBER: _ClassVar[int]
    TIME_LIMIT_FIELD_NUMBER: _ClassVar[int]
    WEIGHTS_FIELD_NUMBER: _ClassVar[int]
    X0_FIELD_NUMBER: _ClassVar[int]
    amg: AMGOptions
    atol: float
    btol: float
    damp: float
    detach: bool
    keep_solution: bool
    label: str
    least_squares: bool
    matrix_id: str
    max_iter: int
    method: str
    preconditioner: str
    progress: ProgressPolicy
    refresh_every: int
    reg: float
    rhs: _containers.RepeatedCompositeFieldContainer[VectorRef]
    rtol: float
    time_limit: _duration_pb2.Duration
    weights: VectorRef
    x0: _containers.RepeatedCompositeFieldContainer[VectorRef]
    def __init__(self, matrix_id: _Optional[str] = ..., rhs: _Optional[_Iterable[_Union[VectorRef, _Mapping]]] = ..., x0: _Optional[_Iterable[_Union[VectorRef, _Mapping]]] = ..., method: _Optional[str] = ..., preconditioner: _Optional[str] = ..., rtol: _Optional[float] = ..., atol: _Optional[float] = ..., max_iter: _Optional[int] = ..., time_limit: _Optional[_Union[_duration_pb2.Duration, _Mapping]] = ..., refresh_every: _Optional[int] = ..., progress: _Optional[_Union[ProgressPolicy, _Mapping]] = ..., detach: bool = ..., keep_solution: bool = ..., label: _Optional[str] = ..., btol: _Optional[float] = ..., damp: _Optional[float] = ..., least_squares: bool = ..., weights: _Optional[_Union[VectorRef, _Mapping]] = ..., reg: _Optional[float] = ..., amg: _Optional[_Union[AMGOptions, _Mapping]] = ...) -> None: ...

class SolveResult(_message.Message):
    __slots__ = ["a_norm_estimate", "advice", "cols", "cond", "converged", "error", "forward_error_estimate", "forward_error_note", "from_cache", "headline", "iterations", "lambda_max", "lambda_min", "matrix", "matrix_id", "method", "method_reason", "multigrid", "nonzeros", "normal_residual_norm", "operator", "per_iteration_seconds", "preconditioner", "preconditioner_bytes", "preconditioner_reason", "recursive_relative_residual", "recursive_residual_norm", "regularization", "relative_residual", "residual_norm", "resumed_from_iteration", "rhs", "rhs_norm", "rows", "settings", "setup_seconds", "shift", "shift_tries", "solve_seconds", "status", "stopped_by", "true_residual_norm", "warning", "warning_text", "weight_ratio", "x_norm", "zero_columns"]
    ADVICE_FIELD_NUMBER: _ClassVar[int]
    A_NORM_ESTIMATE_FIELD_NUMBER: _ClassVar[int]
    COLS_FIELD_NUMBER: _ClassVar[int]
    COND_FIELD_NUMBER: _ClassVar[int]
    CONVERGED_FIELD_NUMBER: _ClassVar[int]
    ERROR_FIELD_NUMBER: _ClassVar[int]
    FORWARD_ERROR_ESTIMATE_FIELD_NUMBER: _ClassVar[int]
    FORWARD_ERROR_NOTE_FIELD_NUMBER: _ClassVar[int]
    FROM_CACHE_FIELD_NUMBER: _ClassVar[int]
    HEADLINE_FIELD_NUMBER: _ClassVar[int]
    ITERATIONS_FIELD_NUMBER: _ClassVar[int]
    LAMBDA_MAX_FIELD_NUMBER: _ClassVar[int]
    LAMBDA_MIN_FIELD_NUMBER: _ClassVar[int]
    MATRIX_FIELD_NUMBER: _ClassVar[int]
    MATRIX_ID_FIELD_NUMBER: _ClassVar[int]
    METHOD_FIELD_NUMBER: _ClassVar[int]
    METHOD_REASON_FIELD_NUMBER: _ClassVar[int]
    MULTIGRID_FIELD_NUMBER: _ClassVar[int]
    NONZEROS_FIELD_NUMBER: _ClassVar[int]
    NORMAL_RESIDUAL_NORM_FIELD_NUMBER: _ClassVar[int]
    OPERATOR_FIELD_NUMBER: _ClassVar[int]
    PER_ITERATION_SECONDS_FIELD_NUMBER: _ClassVar[int]
    PRECONDITIONER_BYTES_FIELD_NUMBER: _ClassVar[int]
    PRECONDITIONER_FIELD_NUMBER: _ClassVar[int]
    PRECONDITIONER_REASON_FIELD_NUMBER: _ClassVar[int]
    RECURSIVE_RELATIVE_RESIDUAL_FIELD_NUMBER: _ClassVar[int]
    RECURSIVE_RESIDUAL_NORM_FIELD_NUMBER: _ClassVar[int]
    REGULARIZATION_FIELD_NUMBER: _ClassVar[int]
    RELATIVE_RESIDUAL_FIELD_NUMBER: _ClassVar[int]
    RESIDUAL_NORM_FIELD_NUMBER: _ClassVar[int]
    RESUMED_FROM_ITERATION_FIELD_NUMBER: _ClassVar[int]
    RHS_FIELD_NUMBER: _ClassVar[int]
    RHS_NORM_FIELD_NUMBER: _ClassVar[int]
    ROWS_FIELD_NUMBER: _ClassVar[int]
    SETTINGS_FIELD_NUMBER: _ClassVar[int]
    SETUP_SECONDS_FIELD_NUMBER: _ClassVar[int]
    SHIFT_FIELD_NUMBER: _ClassVar[int]
    SHIFT_TRIES_FIELD_NUMBER: _ClassVar[int]
    SOLVE_SECONDS_FIELD_NUMBER: _ClassVar[int]
    STATUS_FIELD_NUMBER: _ClassVar[int]
    STOPPED_BY_FIELD_NUMBER: _ClassVar[int]
    TRUE_RESIDUAL_NORM_FIELD_NUMBER: _ClassVar[int]
    WARNING_FIELD_NUMBER: _ClassVar[int]
    WARNING_TEXT_FIELD_NUMBER: _ClassVar[int]
    WEIGHT_RATIO_FIELD_NUMBER: _ClassVar[int]
    X_NORM_FIELD_NUMBER: _ClassVar[int]
    ZERO_COLUMNS_FIELD_NUMBER: _ClassVar[int]
    a_norm_estimate: float
    advice: str
    cols: int
    cond: float
    converged: bool
    error: str
    forward_error_estimate: float
    forward_error_note: str
    from_cache: bool
    headline: str
    iterations: int
    lambda_max: float
    lambda_min: float
    matrix: str
    matrix_id: str
    method: str
    method_reason: str
    multigrid: MultigridReport
    nonzeros: int
    normal_residual_norm: float
    operator: str
    per_iteration_seconds: float
    preconditioner: str
    preconditioner_bytes: int
    preconditioner_reason: str
    recursive_relative_residual: float
    recursive_residual_norm: float
    regularization: float
    relative_residual: float
    residual_norm: float
    resumed_from_iteration: int
    rhs: int
    rhs_norm: float
    rows: int
    settings: Settings
    setup_seconds: float
    shift: float
    shift_tries: int
    solve_seconds: float
    status: str
    stopped_by: str
    true_residual_norm: float
    warning: str
    warning_text: str
    weight_ratio: float
    x_norm: float
    zero_columns: _containers.RepeatedScalarFieldContainer[int]
    def __init__(self, rhs: _Optional[int] = ..., converged: bool = ..., status: _Optional[str] = ..., headline: _Optional[str] = ..., method: _Optional[str] = ..., iterations: _Optional[int] = ..., relative_residual: _Optional[float] = ..., residual_norm: _Optional[float] = ..., true_residual_norm: _Optional[float] = ..., rhs_norm: _Optional[float] = ..., recursive_residual_norm: _Optional[float] = ..., recursive_relative_residual: _Optional[float] = ..., preconditioner: _Optional[str] = ..., preconditioner_reason: _Optional[str] = ..., shift: _Optional[float] = ..., shift_tries: _Optional[int] = ..., preconditioner_bytes: _Optional[int] = ..., setup_seconds: _Optional[float] = ..., solve_seconds: _Optional[float] = ..., per_iteration_seconds: _Optional[float] = ..., lambda_min: _Optional[float] = ..., lambda_max: _Optional[float] = ..., cond: _Optional[float] = ..., settings: _Optional[_Union[Settings, _Mapping]] = ..., from_cache: bool = ..., error: _Optional[str] = ..., normal_residual_norm: _Optional[float] = ..., x_norm: _Optional[float] = ..., a_norm_estimate: _Optional[float] = ..., stopped_by: _Optional[str] = ..., zero_columns: _Optional[_Iterable[int]] = ..., forward_error_estimate: _Optional[float] = ..., forward_error_note: _Optional[str] = ..., warning: _Optional[str] = ..., warning_text: _Optional[str] = ..., advice: _Optional[str] = ..., matrix: _Optional[str] = ..., matrix_id: _Optional[str] = ..., rows: _Optional[int] = ..., cols: _Optional[int] = ..., nonzeros: _Optional[int] = ..., resumed_from_iteration: _Optional[int] = ..., method_reason: _Optional[str] = ..., operator: _Optional[str] = ..., weight_ratio: _Optional[float] = ..., regularization: _Optional[float] = ..., multigrid: _Optional[_Union[MultigridReport, _Mapping]] = ...) -> None: ...

class UploadMatrixRequest(_message.Message):
    __slots__ = ["chunk", "metadata"]
    CHUNK_FIELD_NUMBER: _ClassVar[int]
    METADATA_FIELD_NUMBER: _ClassVar[int]
    chunk: bytes
    metadata: UploadMetadata
    def __init__(self, metadata: _Optional[_Union[UploadMetadata, _Mapping]] = ..., chunk: _Optional[bytes] = ...) -> None: ...

class UploadMetadata(_message.Message):
    __slots__ = ["cols", "encoding", "expected_sha256", "gzip", "name", "nonzeros", "rows", "total_bytes"]
    COLS_FIELD_NUMBER: _ClassVar[int]
    ENCODING_FIELD_NUMBER: _ClassVar[int]
    EXPECTED_SHA256_FIELD_NUMBER: _ClassVar[int]
    GZIP_FIELD_NUMBER: _ClassVar[int]
    NAME_FIELD_NUMBER: _ClassVar[int]
    NONZEROS_FIELD_NUMBER: _ClassVar[int]
    ROWS_FIELD_NUMBER: _ClassVar[int]
    TOTAL_BYTES_FIELD_NUMBER: _ClassVar[int]
    cols: int
    encoding: MatrixEncoding
    expected_sha256: str
    gzip: bool
    name: str
    nonzeros: int
    rows: int
    total_bytes: int
    def __init__(self, name: _Optional[str] = ..., encoding: _Optional[_Union[MatrixEncoding, str]] = ..., gzip: bool = ..., expected_sha256: _Optional[str] = ..., rows: _Optional[int] = ..., cols: _Optional[int] = ..., nonzeros: _Optional[int] = ..., total_bytes: _Optional[int] = ...) -> None: ...

class UploadVectorRequest(_message.Message):
    __slots__ = ["chunk", "metadata"]
    CHUNK_FIELD_NUMBER: _ClassVar[int]
    METADATA_FIELD_NUMBER: _ClassVar[int]
    chunk: bytes
    metadata: VectorMetadata
    def __init__(self, metadata: _Optional[_Union[VectorMetadata, _Mapping]] = ..., chunk: _Optional[bytes] = ...) -> None: ...

class VectorChunk(_message.Message):
    __slots__ = ["data", "last", "length", "offset", "rhs", "sha256"]
    DATA_FIELD_NUMBER: _ClassVar[int]
    LAST_FIELD_NUMBER: _ClassVar[int]
    LENGTH_FIELD_NUMBER: _ClassVar[int]
    OFFSET_FIELD_NUMBER: _ClassVar[int]
    RHS_FIELD_NUMBER: _ClassVar[int]
    SHA256_FIELD_NUMBER: _ClassVar[int]
    data: bytes
    last: bool
    length: int
    offset: int
    rhs: int
    sha256: str
    def __init__(self, rhs: _Optional[int] = ..., length: _Optional[int] = ..., offset: _Optional[int] = ..., data: _Optional[bytes] = ..., last: bool = ..., sha256: _Optional[str] = ...) -> None: ...

class VectorInfo(_message.Message):
    __slots__ = ["id", "length", "name"]
    ID_FIELD_NUMBER: _ClassVar[int]
    LENGTH_FIELD_NUMBER: _ClassVar[int]
    NAME_FIELD_NUMBER: _ClassVar[int]
    id: str
    length: int
    name: str
    def __init__(self, id: _Optional[str] = ..., length: _Optional[int] = ..., name: _Optional[str] = ...) -> None: ...

class VectorMetadata(_message.Message):
    __slots__ = ["length", "name"]
    LENGTH_FIELD_NUMBER: _ClassVar[int]
    NAME_FIELD_NUMBER: _ClassVar[int]
    length: int
    name: str
    def __init__(self, length: _Optional[int] = ..., name: _Optional[str] = ...) -> None: ...

class VectorRef(_message.Message):
    __slots__ = ["data", "vector_id"]
    DATA_FIELD_NUMBER: _ClassVar[int]
    VECTOR_ID_FIELD_NUMBER: _ClassVar[int]
    data: bytes
    vector_id: str
    def __init__(self, data: _Optional[bytes] = ..., vector_id: _Optional[str] = ...) -> None: ...

class WatchRequest(_message.Message):
    __slots__ = ["job_id"]
    JOB_ID_FIELD_NUMBER: _ClassVar[int]
    job_id: str
    def __init__(self, job_id: _Optional[str] = ...) -> None: ...

class MatrixEncoding(int, metaclass=_enum_type_wrapper.EnumTypeWrapper):
    __slots__ = []

class JobState(int, metaclass=_enum_type_wrapper.EnumTypeWrapper):
    __slots__ = []
