using System.IO.Compression;

namespace Bitbudget.Search.Evaluation;

/// <summary>
/// Reads a NumPy .npz archive (a zip of .npy members, stored or deflated, as <c>np.savez</c> and
/// <c>np.savez_compressed</c> write it). Member <c>x.npy</c> becomes array <c>x</c>. Members are read in
/// memory, never written to disk, yet names that are paths out of the archive (<c>..</c>, a leading
/// slash or backslash, a drive letter) or directories are refused: no dataset of ours carries them.
/// </summary>
public static class NpzReader
{
    /// <summary>Slack over the data cap for a member's .npy preamble and header.</summary>
    private const long HeaderAllowanceBytes = 64 * 1024 + 16;

    /// <summary>Reads every array of the archive, in archive order, within <paramref name="limits"/>.</summary>
    public static IReadOnlyList<NpyArray> Read(Stream stream, DatasetLimits? limits = null)
    {
        ArgumentNullException.ThrowIfNull(stream);
        limits ??= DatasetLimits.Default;
        try
        {
            using var archive = new ZipArchive(stream, ZipArchiveMode.Read, leaveOpen: true);
            var entries = archive.Entries;
            if (entries.Count > limits.MaxArrays)
                throw DatasetErrors.TooLarge($"The .npz holds {entries.Count} members; at most {limits.MaxArrays} arrays are read.");
            if (entries.Count == 0)
                throw DatasetErrors.Invalid("The .npz holds no arrays.");

            var arrays = new List<NpyArray>(entries.Count);
            var seen = new HashSet<string>(StringComparer.Ordinal);
            long total = 0;
            foreach (var entry in entries)
            {
                string name = ArrayName(entry.FullName);
                if (!seen.Add(name))
                    throw DatasetErrors.Invalid($"The .npz holds two members for array '{name}'.");
                var array = ReadMember(entry, name, limits, limits.MaxTotalBytes - total);
                total += array.ByteCount;
                arrays.Add(array);
            }
            return arrays;
        }
        catch (InvalidDataException e)
        {
            throw DatasetErrors.Invalid($"The .npz is not a readable zip archive: {e.Message}", e);
        }
    }

    private static NpyArray ReadMember(ZipArchiveEntry entry, string name, DatasetLimits limits, long remainingTotal)
    {
        long cap = Math.Min(limits.MaxArrayBytes, remainingTotal);
        // The sizes in the zip headers are claims; refuse early on a claim, but count real bytes below.
        if (entry.Length > cap + HeaderAllowanceBytes)
            throw DatasetErrors.TooLarge(
                $"The .npz member '{entry.FullName}' is {DatasetErrors.FormatBytes(entry.Length)} uncompressed; " +
                $"the limit left for it is {DatasetErrors.FormatBytes(cap)}. Send fewer samples.");
        if (entry.Length > LimitedReadStream.RatioFloorBytes && entry.Length > limits.MaxCompressionRatio * Math.Max(1, entry.CompressedLength))
            throw DatasetErrors.TooLarge(
                $"The .npz member '{entry.FullName}' claims to inflate {entry.Length / (double)Math.Max(1, entry.CompressedLength):0} times its compressed size, " +
                $"more than the {limits.MaxCompressionRatio:0.#} a dataset plausibly reaches; it looks like a zip bomb.");

        using var stream = new LimitedReadStream(entry.Open(), entry.FullName, cap + HeaderAllowanceBytes, entry.CompressedLength, limits.MaxCompressionRatio);
        var array = NpyReader.Read(stream, name, limits with { MaxTotalBytes = remainingTotal });
        if (stream.ReadByte() != -1)
            throw DatasetErrors.Invalid($"The .npz member '{entry.FullName}' has bytes after its array; each member holds exactly one .npy array.");
        return array;
    }

    /// <summary>Checks a member name and strips its .npy suffix, as NumPy's loader does.</summary>
    internal static string ArrayName(string memberName)
    {
        string? why = null;
        if (memberName.Length == 0) why = "it is empty";
        else if (memberName.EndsWith('/') || memberName.EndsWith('\\')) why = "it is a directory";
        else if (memberName[0] is '/' or '\\') why = "it is an absolute path";
        else if (memberName.Length >= 2 && char.IsAsciiLetter(memberName[0]) && memberName[1] == ':') why = "it starts with a drive letter";
        else if (memberName.Split('/', '\\').Any(part => part == "..")) why = "it climbs out of the archive with '..'";
        else if (memberName.Any(char.IsControl)) why = "it holds control characters";
        if (why is not null)
            throw DatasetErrors.BadMemberName(
                $"The .npz member '{memberName}' is not an array name ({why}); members are named after arrays, like 'x.npy'.");
        return memberName.EndsWith(".npy", StringComparison.Ordinal) ? memberName[..^4] : memberName;
    }
}
