using System.ComponentModel.DataAnnotations;

namespace Bitbudget.Service.Hosting;

/// <summary>Settings of the service, bound from the "Bitbudget" configuration section.</summary>
internal sealed class BitbudgetOptions
{
    public const string Section = "Bitbudget";

    private string store = StoreKinds.Sqlite;
    private string role = Roles.All;

    /// <summary>Address the host listens on when no ASP.NET Core URL setting overrides it.</summary>
    [Required]
    public string Listen { get; set; } = "http://127.0.0.1:5080";

    /// <summary>Folder that holds the store, the job queue, blobs, logs and the generated API key.</summary>
    [Required]
    public string DataFolder { get; set; } = "./data";

    /// <summary>Where the store and the job queue live: <c>sqlite</c> (files in the data folder) or <c>postgres</c> (a shared database, <see cref="ConnectionString"/>).</summary>
    [Required]
    public string Store { get => store; set => store = value?.Trim().ToLowerInvariant() ?? ""; }

    /// <summary>Npgsql connection string of the shared PostgreSQL database (Store = postgres), e.g. <c>Host=db;Username=bitbudget;Password=...;Database=bitbudget</c>.</summary>
    public string? ConnectionString { get; set; }

    /// <summary>What this process does: <c>all</c> (HTTP API and jobs), <c>api</c> (HTTP API, queues jobs, runs none) or <c>worker</c> (runs jobs; serves only /healthz and /metrics).</summary>
    [Required]
    public string Role { get => role; set => role = value?.Trim().ToLowerInvariant() ?? ""; }

    /// <summary>Folder of the content-addressed blobs (uploads, results); default &lt;DataFolder&gt;/blobs. Every process of a shared store must see the same folder.</summary>
    public string? BlobFolder { get; set; }

    /// <summary>
    /// Parts a search's sensitivity sweep is split into, each a job any worker can take (groups of whole layers);
    /// 1 runs the whole search as one job.
    /// </summary>
    [Range(1, 1_000)]
    public int SweepParts { get; set; } = 1;

    /// <summary>ONNX Runtime intra-op threads per search run; unset lets ONNX Runtime choose (one per core). Set it to the cores a worker process is given.</summary>
    [Range(1, 256)]
    public int? OnnxThreads { get; set; }

    /// <summary>Hangfire workers in this process; 0 makes the process API-only.</summary>
    [Range(0, 64)]
    public int Workers { get; set; } = 1;

    /// <summary>How often idle workers look for queued searches.</summary>
    [Range(50, 60_000)]
    public int QueuePollIntervalMs { get; set; } = 500;

    /// <summary>API keys accepted as bearer tokens (in addition to BITBUDGET_API_KEYS).</summary>
    public List<string> ApiKeys { get; set; } = [];

    [Range(1, long.MaxValue)]
    public long MaxModelBytes { get; set; } = 512L * 1024 * 1024;

    [Range(1, long.MaxValue)]
    public long MaxDatasetBytes { get; set; } = 1024L * 1024 * 1024;

    /// <summary>Most bytes a dataset may decode to (a compressed .npz can inflate far beyond its upload size).</summary>
    [Range(1, long.MaxValue)]
    public long MaxDatasetDecodedBytes { get; set; } = 2048L * 1024 * 1024;

    /// <summary>
    /// Most memory one search may be estimated to hold (decoded calibration set, reference and trial outputs,
    /// activation cache at its cap, weights); a search over it is refused at submission with how many samples fit.
    /// </summary>
    [Range(1, long.MaxValue)]
    public long MaxSearchMemoryBytes { get; set; } = 2048L * 1024 * 1024;

    /// <summary>
    /// Memory a search's sweep plans for: the samples per run and the activations cached at cut points are chosen to fit
    /// it (the decoded data and the outputs count first). Changing it can move trial results in the last bits (other
    /// samples per run), so stored trials are reused only by searches run under the same value.
    /// </summary>
    [Range(64L * 1024 * 1024, long.MaxValue)]
    public long MaxSweepMemoryBytes { get; set; } = Bitbudget.Search.Evaluation.TrialSessionOptions.DefaultMaxSweepMemoryBytes;

    /// <summary>Longest an uploaded model may take to load in ONNX Runtime, the check every model passes at upload.</summary>
    [Range(1, 600)]
    public int ModelCheckSeconds { get; set; } = 30;

    /// <summary>Models with more quantizable layers are refused (each layer costs several trials).</summary>
    [Range(1, 100_000)]
    public int MaxLayers { get; set; } = 2_000;

    /// <summary>Calibration sets with more samples are refused (every trial runs all of them).</summary>
    [Range(1, 10_000_000)]
    public long MaxDatasetSamples { get; set; } = 100_000;

    /// <summary>Longest a request may take, uploads included.</summary>
    [Range(1, 3_600)]
    public int RequestTimeoutSeconds { get; set; } = 300;

    /// <summary>How long a worker's claim on a running search lasts without renewal, in seconds (renewed four times per lease). After a crash the search is picked up again once it lapses.</summary>
    [Range(4, 3600)]
    public int LeaseSeconds { get; set; } = 60;

    /// <summary>How often to look for searches whose worker died, in seconds.</summary>
    [Range(5, 3_600)]
    public int RecoveryIntervalSeconds { get; set; } = 60;

    /// <summary>Serves the Hangfire dashboard at /jobs, behind the same API keys.</summary>
    public bool Dashboard { get; set; }

    /// <summary>Absolute path of <see cref="DataFolder"/>.</summary>
    public string DataPath => Path.GetFullPath(DataFolder);

    /// <summary>Absolute path of <see cref="BlobFolder"/>, or the data folder's blobs folder.</summary>
    public string BlobPath => Path.GetFullPath(string.IsNullOrEmpty(BlobFolder) ? Path.Combine(DataPath, "blobs") : BlobFolder);

    /// <summary>True when this process serves the HTTP API (roles all and api).</summary>
    public bool ServesApi => Role is not Roles.Worker;

    /// <summary>True when this process runs jobs (roles all and worker, with at least one worker thread).</summary>
    public bool RunsJobs => Role is not Roles.Api && Workers > 0;
}
