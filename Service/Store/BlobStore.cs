using System.Security.Cryptography;

namespace Bitbudget.Service.Store;

/// <summary>
/// Content-addressed files under &lt;data&gt;/blobs: a blob's name is the SHA-256 of its bytes, so a write
/// is idempotent and a reader never sees a half-written file. Files are readable by the service's user
/// only (0600, folders 0700): models and calibration data are often confidential.
/// </summary>
internal sealed class BlobStore
{
    /// <summary>Staged files older than this are left over from a crashed write (a live write takes seconds) and are removed at start.</summary>
    public static readonly TimeSpan StaleStagedAge = TimeSpan.FromHours(1);

    private readonly string root;
    private readonly string staging;

    public BlobStore(string root)
    {
        this.root = root;
        staging = System.IO.Path.Combine(root, "tmp");
        DataFolder.CreateDirectory(root);
        DataFolder.CreateDirectory(staging);
    }

    /// <summary>
    /// Deletes staged files a crashed write left behind (a kill -9 between create and rename skips the
    /// finally that removes them). Only old ones: another process on the same folder may be writing now.
    /// </summary>
    /// <returns>How many were removed.</returns>
    public int RemoveStaleStagedFiles(DateTimeOffset now)
    {
        var removed = 0;
        foreach (var file in Directory.EnumerateFiles(staging, "*.part"))
        {
            if (now - File.GetLastWriteTimeUtc(file) > StaleStagedAge)
            {
                File.Delete(file);
                removed++;
            }
        }

        return removed;
    }

    /// <summary>Writes, flushes and deletes a small file where blobs are staged; throws when the folder cannot take a write.</summary>
    public void ProbeWrite()
    {
        var probe = System.IO.Path.Combine(staging, $"probe.{Guid.NewGuid():N}.part");
        try
        {
            using var stream = new FileStream(probe, DataFolder.NewFile(FileMode.CreateNew, FileAccess.Write, bufferSize: 1));
            stream.Write("probe"u8);
            stream.Flush(flushToDisk: true);
        }
        finally
        {
            File.Delete(probe);
        }
    }

    public static string Sha256Hex(ReadOnlySpan<byte> bytes) => Convert.ToHexStringLower(SHA256.HashData(bytes));

    /// <summary>Stores the bytes (temp file, fsync, atomic rename) unless that content is already there.</summary>
    /// <returns>The lower-case hex SHA-256 that names the blob.</returns>
    public string Put(ReadOnlySpan<byte> bytes)
    {
        var sha = Sha256Hex(bytes);
        var target = PathOf(sha);
        if (File.Exists(target))
        {
            return sha;
        }

        DataFolder.CreateDirectory(System.IO.Path.GetDirectoryName(target)!);
        var temp = System.IO.Path.Combine(staging, $"{sha}.{Guid.NewGuid():N}.part");
        try
        {
            using (var stream = new FileStream(temp, DataFolder.NewFile(FileMode.CreateNew, FileAccess.Write, bufferSize: 1 << 16)))
            {
                stream.Write(bytes);
                // Data must reach the disk before the rename makes it visible under its final name.
                stream.Flush(flushToDisk: true);
            }

            try
            {
                File.Move(temp, target, overwrite: false);
            }
            catch (IOException) when (File.Exists(target))
            {
                // Another writer stored the same content first; its file has the same bytes.
            }
        }
        finally
        {
            File.Delete(temp);
        }

        return sha;
    }

    /// <summary>A fresh path in the staging folder for an upload being received (a <c>.part</c> file until stored).</summary>
    public string NewStagingPath() => System.IO.Path.Combine(staging, $"upload.{Guid.NewGuid():N}.part");

    /// <summary>
    /// Stores a staged file (already on disk, fsynced by its writer, named by <paramref name="sha256"/>) by moving it
    /// into place, so a large upload is written once and never read back into memory to be stored.
    /// </summary>
    public string PutStaged(string stagedPath, string sha256)
    {
        var target = PathOf(sha256);
        if (File.Exists(target))
        {
            File.Delete(stagedPath);
            return sha256;
        }

        DataFolder.CreateDirectory(System.IO.Path.GetDirectoryName(target)!);
        try
        {
            File.Move(stagedPath, target, overwrite: false);
        }
        catch (IOException) when (File.Exists(target))
        {
            // Another writer stored the same content first; its file has the same bytes.
            File.Delete(stagedPath);
        }

        return sha256;
    }

    public bool Exists(string sha256) => File.Exists(PathOf(sha256));

    public byte[] Read(string sha256)
    {
        var path = PathOf(sha256);
        if (!File.Exists(path))
        {
            throw new FileNotFoundException($"Blob {sha256} is missing from the data folder.", path);
        }

        return File.ReadAllBytes(path);
    }

    public string PathOf(string sha256)
    {
        if (sha256.Length != 64 || !sha256.All(char.IsAsciiHexDigitLower))
        {
            throw new ArgumentException("A blob name is 64 lower-case hex digits.", nameof(sha256));
        }

        return System.IO.Path.Combine(root, sha256[..2], sha256);
    }
}
