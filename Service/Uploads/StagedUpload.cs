namespace Bitbudget.Service.Uploads;

/// <summary>
/// A request body written once to a file in the blob store's staging folder and hashed as it arrived, so an
/// upload is never held in memory whole. Disposing deletes the file unless the blob store took it.
/// </summary>
internal sealed class StagedUpload(string path, long length, string sha256) : IDisposable
{
    public string Path { get; } = path;

    public long Length { get; } = length;

    /// <summary>Lower-case hex SHA-256 of the body.</summary>
    public string Sha256 { get; } = sha256;

    /// <summary>Opens the staged bytes for reading (seekable).</summary>
    public FileStream Open() => new(Path, FileMode.Open, FileAccess.Read, FileShare.Read, 1 << 16, FileOptions.SequentialScan);

    public byte[] ReadAllBytes() => File.ReadAllBytes(Path);

    public void Dispose()
    {
        try
        {
            File.Delete(Path);
        }
        catch (IOException)
        {
            // Left for the staging sweep; the upload's answer does not depend on it.
        }
    }
}
