namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Reads an uploaded dataset file, telling .npz (a zip) from .npy by its first bytes. A single .npy
/// becomes one array named <see cref="SingleArrayName"/>; <see cref="CalibrationSet.Create"/> maps an
/// array of that name to the model's only input when no input carries the name itself.
/// </summary>
public static class DatasetReader
{
    /// <summary>Name given to the array of a single .npy file.</summary>
    public const string SingleArrayName = "input";

    /// <summary>
    /// Describes every array a dataset file holds (name, type, shape, decoded size) in bounded memory: headers
    /// first, so the decoded size is checked against <paramref name="limits"/> before any data inflates, then the
    /// data streamed through a small buffer to check it is complete. What an upload needs; nothing is decoded.
    /// </summary>
    /// <param name="verifyData">False reads the headers alone (a file already checked at upload).</param>
    public static IReadOnlyList<NpyArrayInfo> Inspect(Stream stream, DatasetLimits? limits = null, bool verifyData = true)
    {
        var kind = Detect(stream);
        if (kind == FileKind.Npz)
            return NpzReader.Inspect(stream, limits, verifyData);
        if (kind == FileKind.Npy)
        {
            if (!verifyData)
                return [NpyReader.ReadInfo(stream, SingleArrayName, limits)];
            var info = NpyReader.Skim(stream, SingleArrayName, limits);
            if (stream.Position != stream.Length)
                throw DatasetErrors.Invalid(
                    $"The .npy file has {stream.Length - stream.Position} bytes after its array; send several arrays as an .npz (np.savez).");
            return [info];
        }
        throw NotADataset(kind == FileKind.Empty);
    }

    /// <summary>Reads every array of a seekable dataset file (a <see cref="FileStream"/>), within <paramref name="limits"/>.</summary>
    public static IReadOnlyList<NpyArray> Read(Stream stream, DatasetLimits? limits = null)
    {
        var kind = Detect(stream);
        if (kind == FileKind.Npz)
            return NpzReader.Read(stream, limits);
        if (kind == FileKind.Npy)
        {
            var array = NpyReader.Read(stream, SingleArrayName, limits);
            if (stream.Position != stream.Length)
                throw DatasetErrors.Invalid(
                    $"The .npy file has {stream.Length - stream.Position} bytes after its array; send several arrays as an .npz (np.savez).");
            return [array];
        }
        throw NotADataset(kind == FileKind.Empty);
    }

    private enum FileKind { Empty, Npy, Npz, Other }

    /// <summary>Tells .npz (a zip: a local file header, or the end-of-directory record alone for an empty archive) from .npy by the first bytes, leaving the stream where it was.</summary>
    private static FileKind Detect(Stream stream)
    {
        ArgumentNullException.ThrowIfNull(stream);
        Span<byte> start = stackalloc byte[6];
        long origin = stream.Position;
        int got = stream.ReadAtLeast(start, start.Length, throwOnEndOfStream: false);
        stream.Position = origin;
        start = start[..got];
        if (got == 0)
            return FileKind.Empty;
        if (start.StartsWith("PK\x03\x04"u8) || start.StartsWith("PK\x05\x06"u8))
            return FileKind.Npz;
        return start.StartsWith(NpyReader.Magic) ? FileKind.Npy : FileKind.Other;
    }

    private static EngineException NotADataset(bool empty) => DatasetErrors.Invalid(
        empty
            ? "The dataset file is empty."
            : "The dataset file is neither .npy (which starts with \\x93NUMPY) nor .npz (a zip archive); save it with np.save or np.savez.");

    /// <summary>Reads every array the file holds, within <paramref name="limits"/>.</summary>
    public static IReadOnlyList<NpyArray> Read(byte[] bytes, DatasetLimits? limits = null)
    {
        ArgumentNullException.ThrowIfNull(bytes);
        using var stream = new MemoryStream(bytes, writable: false);
        return Read(stream, limits);
    }
}
