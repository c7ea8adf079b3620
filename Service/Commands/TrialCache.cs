using System.Text.Json;
using Bitbudget.Search.Planning;
using Bitbudget.Service.Store;

namespace Bitbudget.Service.Commands;

/// <summary>
/// The command line's trial store: trials live in memory for the run, and sensitivity trials are also kept in
/// one file per <see cref="TrialContext"/> in the user's cache folder, so a second <c>plan</c> on the same model,
/// dataset and settings (say, with another budget) reads its sweep instead of measuring it again. The file's
/// name is the context hash, which covers the model's and the dataset's bytes and every setting a trial
/// depends on: a changed byte or setting names another file and never meets a stale trial.
/// </summary>
internal sealed class TrialCache : ITrialStore
{
    private readonly InMemoryTrialStore _trials;
    private readonly string? _file;

    private TrialCache(InMemoryTrialStore trials, string? file, int reused)
    {
        _trials = trials;
        _file = file;
        Reused = reused;
    }

    /// <summary>How many sensitivity trials came from the cache file (each says so in <see cref="TrialRecord.ReusedFrom"/>: the file).</summary>
    public int Reused { get; }

    /// <summary>The cache file, or null when the cache is off or could not be read.</summary>
    public string? File => _file;

    /// <summary>Set when the cache could not be used; the run goes on without it.</summary>
    public string? Problem { get; private set; }

    /// <summary>
    /// The cache folder: <c>$XDG_CACHE_HOME/bitbudget/trials</c>, or <c>~/.cache/bitbudget/trials</c> when the
    /// variable is unset or not an absolute path (the XDG base-directory specification says to ignore a relative one).
    /// </summary>
    public static string Folder()
    {
        var xdg = Environment.GetEnvironmentVariable("XDG_CACHE_HOME");
        var root = !string.IsNullOrEmpty(xdg) && Path.IsPathRooted(xdg)
            ? xdg
            : Path.Combine(Environment.GetFolderPath(Environment.SpecialFolder.UserProfile), ".cache");
        return Path.Combine(root, "bitbudget", "trials");
    }

    /// <summary>A store with no cache behind it (<c>--no-cache</c>).</summary>
    public static TrialCache Off() => new(new InMemoryTrialStore(), null, 0);

    /// <summary>Opens the cache file of <paramref name="context"/> in <paramref name="folder"/>, reading the trials it holds.</summary>
    public static TrialCache Open(string folder, string context)
    {
        var file = Path.Combine(folder, context + ".jsonl");
        try
        {
            Directory.CreateDirectory(folder);
            var cached = new InMemoryTrialStore(System.IO.File.Exists(file) ? Read(file).Select(t => t with { ReusedFrom = file }) : []);
            return new TrialCache(cached, file, cached.LoadAll().Count);
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            return new TrialCache(new InMemoryTrialStore(), null, 0) { Problem = $"the trial cache in {folder} cannot be used ({e.Message}); measuring every trial" };
        }
    }

    public IReadOnlyDictionary<string, TrialRecord> LoadAll() => _trials.LoadAll();

    public void Save(TrialRecord trial)
    {
        ArgumentNullException.ThrowIfNull(trial);
        var before = _trials.Saves;
        _trials.Save(trial);

        // Validations belong to one search's budget; only the sweep is shared between runs.
        if (_file is null || _trials.Saves == before || trial.Kind != "sensitivity")
        {
            return;
        }

        try
        {
            // One write per line: a run that dies mid-sweep leaves whole lines, or one torn last line that Read skips.
            System.IO.File.AppendAllText(_file, StoreJson.Write(trial) + "\n");
        }
        catch (Exception e) when (e is IOException or UnauthorizedAccessException)
        {
            Problem ??= $"the trial cache file {_file} cannot be written ({e.Message}); this run's trials are not cached";
        }
    }

    /// <summary>The sensitivity trials of a cache file; a line that does not parse (a torn write) is skipped.</summary>
    private static List<TrialRecord> Read(string file)
    {
        var trials = new List<TrialRecord>();
        foreach (var line in System.IO.File.ReadLines(file))
        {
            if (line.Length == 0)
            {
                continue;
            }

            try
            {
                if (StoreJson.Read<TrialRecord>(line) is { Kind: "sensitivity" } trial)
                {
                    trials.Add(trial);
                }
            }
            catch (Exception e) when (e is JsonException or InvalidDataException)
            {
                // A torn last line of a run that was killed: that trial is measured again.
            }
        }

        return trials;
    }
}
