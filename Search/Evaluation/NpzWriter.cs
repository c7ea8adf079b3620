using System.IO.Compression;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Writes arrays as a NumPy .npz archive: one member <c>name.npy</c> per array. Every member carries
/// the same fixed time stamp, so the same arrays always give the same bytes.
/// </summary>
public static class NpzWriter
{
    /// <summary>
    /// The time stamp of every member: 1980-01-01 00:00, the earliest an MS-DOS (ZIP) date can hold.
    /// A clock time would make two writes of the same arrays differ.
    /// </summary>
    public static DateTimeOffset EntryTime { get; } = new(1980, 1, 1, 0, 0, 0, TimeSpan.Zero);

    /// <summary>
    /// Writes <paramref name="arrays"/> to <paramref name="stream"/>, deflated (as np.savez_compressed)
    /// or stored (as np.savez). The stream is left open.
    /// </summary>
    public static void Write(Stream stream, IReadOnlyList<NpyArray> arrays, bool compress = true)
    {
        ArgumentNullException.ThrowIfNull(stream);
        ArgumentNullException.ThrowIfNull(arrays);
        var names = new HashSet<string>(StringComparer.Ordinal);
        foreach (var array in arrays)
        {
            NpzReader.ArrayName(array.Name + ".npy");
            if (!names.Add(array.Name))
                throw new ArgumentException($"Two arrays are named '{array.Name}'.", nameof(arrays));
        }
        using var archive = new ZipArchive(stream, ZipArchiveMode.Create, leaveOpen: true);
        foreach (var array in arrays)
        {
            var entry = archive.CreateEntry(array.Name + ".npy", compress ? CompressionLevel.Optimal : CompressionLevel.NoCompression);
            entry.LastWriteTime = EntryTime;
            using var member = entry.Open();
            NpyWriter.Write(member, array);
        }
    }
}
