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
            RefuseManyMembers(stream, limits);
            using var archive = new ZipArchive(stream, ZipArchiveMode.Read, leaveOpen: true);
            var members = Members(archive, limits);
            var arrays = new List<NpyArray>(members.Count);
            long total = 0;
            foreach (var (entry, name) in members)
            {
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

    /// <summary>
    /// Describes every array of the archive in bounded memory: first every member's .npy header alone (a few
    /// KiB inflated each), so the decoded size is known and checked against <see cref="DatasetLimits.MaxTotalBytes"/>
    /// before any data inflates; then each member's data is streamed through a small buffer to check it is all
    /// there, with the same ratio and size caps as <see cref="Read"/>.
    /// </summary>
    /// <param name="verifyData">False stops after the headers (a file already checked at upload).</param>
    public static IReadOnlyList<NpyArrayInfo> Inspect(Stream stream, DatasetLimits? limits = null, bool verifyData = true)
    {
        ArgumentNullException.ThrowIfNull(stream);
        limits ??= DatasetLimits.Default;
        RefuseManyMembers(stream, limits);
        try
        {
            using var archive = new ZipArchive(stream, ZipArchiveMode.Read, leaveOpen: true);
            var members = Members(archive, limits);
            var headerLimits = limits with { MaxTotalBytes = limits.MaxArrayBytes };
            var infos = new List<NpyArrayInfo>(members.Count);
            foreach (var (entry, name) in members)
            {
                CheckClaims(entry, limits, limits.MaxArrayBytes);
                using var header = Open(entry, limits, limits.MaxArrayBytes);
                infos.Add(NpyReader.ReadInfo(header, name, headerLimits));
            }

            var total = infos.Sum(i => i.ByteCount);
            if (total > limits.MaxTotalBytes)
            {
                var samples = infos.Max(i => i.SampleCount);
                var perSample = samples > 0 ? Math.Max(1, total / samples) : total;
                throw DatasetErrors.TooLarge(
                    $"The dataset's arrays decode to {DatasetErrors.FormatBytes(total)} by their .npy headers, more than the {DatasetErrors.FormatBytes(limits.MaxTotalBytes)} " +
                    $"a decoded dataset may take here; at {DatasetErrors.FormatBytes(perSample)} per sample, at most {limits.MaxTotalBytes / perSample} of its {samples} samples would fit.");
            }

            foreach (var (entry, name) in verifyData ? members : [])
            {
                using var data = Open(entry, limits, limits.MaxArrayBytes);
                NpyReader.Skim(data, name, headerLimits);
                if (data.ReadByte() != -1)
                    throw DatasetErrors.Invalid($"The .npz member '{entry.FullName}' has bytes after its array; each member holds exactly one .npy array.");
                data.CheckCrc();
            }
            return infos;
        }
        catch (InvalidDataException e)
        {
            throw DatasetErrors.Invalid($"The .npz is not a readable zip archive: {e.Message}", e);
        }
    }

    /// <summary>
    /// Reads the entry count of the end-of-central-directory record (PKWARE APPNOTE.TXT 4.3.16) before
    /// ZipArchive builds an object per entry: a small file can list millions of entries.
    /// </summary>
    private static void RefuseManyMembers(Stream stream, DatasetLimits limits)
    {
        if (!stream.CanSeek || stream.Length < 22)
            return;
        int tail = (int)Math.Min(stream.Length, 22 + 0xFFFF);
        var buffer = new byte[tail];
        long start = stream.Position;
        stream.Seek(-tail, SeekOrigin.End);
        stream.ReadExactly(buffer);
        stream.Position = start;
        for (int at = tail - 22; at >= 0; at--)
        {
            if (buffer[at] == 0x50 && buffer[at + 1] == 0x4B && buffer[at + 2] == 0x05 && buffer[at + 3] == 0x06)
            {
                int entries = buffer[at + 10] | (buffer[at + 11] << 8);
                if (entries > limits.MaxArrays)
                    throw DatasetErrors.TooLarge($"The .npz lists {entries} members; at most {limits.MaxArrays} arrays are read.");
                return;
            }
        }
    }

    private static List<(ZipArchiveEntry Entry, string Name)> Members(ZipArchive archive, DatasetLimits limits)
    {
        var entries = archive.Entries;
        if (entries.Count > limits.MaxArrays)
            throw DatasetErrors.TooLarge($"The .npz holds {entries.Count} members; at most {limits.MaxArrays} arrays are read.");
        if (entries.Count == 0)
            throw DatasetErrors.Invalid("The .npz holds no arrays.");
        var seen = new HashSet<string>(StringComparer.Ordinal);
        var members = new List<(ZipArchiveEntry, string)>(entries.Count);
        foreach (var entry in entries)
        {
            string name = ArrayName(entry.FullName);
            if (!seen.Add(name))
                throw DatasetErrors.Invalid($"The .npz holds two members for array '{name}'.");
            members.Add((entry, name));
        }
        return members;
    }

    private static NpyArray ReadMember(ZipArchiveEntry entry, string name, DatasetLimits limits, long remainingTotal)
    {
        long cap = Math.Min(limits.MaxArrayBytes, remainingTotal);
        CheckClaims(entry, limits, cap);
        using var stream = Open(entry, limits, cap);
        var array = NpyReader.Read(stream, name, limits with { MaxTotalBytes = remainingTotal });
        if (stream.ReadByte() != -1)
            throw DatasetErrors.Invalid($"The .npz member '{entry.FullName}' has bytes after its array; each member holds exactly one .npy array.");
        stream.CheckCrc();
        return array;
    }

    private static void CheckClaims(ZipArchiveEntry entry, DatasetLimits limits, long cap)
    {
        // The sizes in the zip headers are claims; refuse early on a claim, but count real bytes as they inflate.
        if (entry.Length > cap + HeaderAllowanceBytes)
            throw DatasetErrors.TooLarge(
                $"The .npz member '{entry.FullName}' is {DatasetErrors.FormatBytes(entry.Length)} uncompressed; " +
                $"the limit left for it is {DatasetErrors.FormatBytes(cap)}. Send fewer samples.");
        if (entry.Length > LimitedReadStream.RatioFloorBytes && entry.Length > limits.MaxCompressionRatio * Math.Max(1, entry.CompressedLength))
            throw DatasetErrors.TooLarge(
                $"The .npz member '{entry.FullName}' claims to inflate {entry.Length / (double)Math.Max(1, entry.CompressedLength):0} times its compressed size, " +
                $"more than the {limits.MaxCompressionRatio:0.#} a dataset plausibly reaches; it looks like a zip bomb.");
    }

    private static LimitedReadStream Open(ZipArchiveEntry entry, DatasetLimits limits, long cap) =>
        new(entry.Open(), entry.FullName, cap + HeaderAllowanceBytes, entry.CompressedLength, limits.MaxCompressionRatio, entry.Crc32);

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
