using System.IO.Compression;

namespace Bitbudget.Search.Evaluation;

/// <summary>Writes arrays as a NumPy .npz archive: one member <c>name.npy</c> per array.</summary>
public static class NpzWriter
{
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
            using var member = entry.Open();
            NpyWriter.Write(member, array);
        }
    }
}
