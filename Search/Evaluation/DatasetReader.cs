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

    /// <summary>Reads every array the file holds, within <paramref name="limits"/>.</summary>
    public static IReadOnlyList<NpyArray> Read(byte[] bytes, DatasetLimits? limits = null)
    {
        ArgumentNullException.ThrowIfNull(bytes);
        var span = bytes.AsSpan();
        // Local file header, or the end-of-directory record alone for an empty archive.
        if (span.StartsWith("PK\x03\x04"u8) || span.StartsWith("PK\x05\x06"u8))
        {
            using var zip = new MemoryStream(bytes, writable: false);
            return NpzReader.Read(zip, limits);
        }
        if (span.StartsWith(NpyReader.Magic))
        {
            using var npy = new MemoryStream(bytes, writable: false);
            var array = NpyReader.Read(npy, SingleArrayName, limits);
            if (npy.Position != npy.Length)
                throw DatasetErrors.Invalid(
                    $"The .npy file has {npy.Length - npy.Position} bytes after its array; send several arrays as an .npz (np.savez).");
            return [array];
        }
        throw DatasetErrors.Invalid(
            bytes.Length == 0
                ? "The dataset file is empty."
                : "The dataset file is neither .npy (which starts with \\x93NUMPY) nor .npz (a zip archive); save it with np.save or np.savez.");
    }
}
