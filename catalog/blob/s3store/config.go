package s3store

import (
	"fmt"
	"os"
	"path/filepath"
	"strconv"

	"github.com/minio/minio-go/v7/pkg/credentials"
)

// The environment FromEnv reads. The AWS_ names are the ones the AWS
// command line and SDKs read (AWS CLI User Guide, "Environment variables
// to configure the AWS CLI"), so one set of variables serves flowcat and
// the usual tools alike.
const (
	EnvEndpointS3  = "AWS_ENDPOINT_URL_S3" // the server's URL, for S3 only
	EnvEndpoint    = "AWS_ENDPOINT_URL"    // the server's URL, for every service
	EnvRegion      = "AWS_REGION"          // default us-east-1
	EnvAccessKey   = "AWS_ACCESS_KEY_ID"
	EnvSecretKey   = "AWS_SECRET_ACCESS_KEY"
	EnvSessionTok  = "AWS_SESSION_TOKEN"
	EnvCredsFile   = "AWS_SHARED_CREDENTIALS_FILE" // default ~/.aws/credentials
	EnvProfile     = "AWS_PROFILE"                 // the section of that file; default "default"
	EnvPartSizeMiB = "FLOWCAT_S3_PART_MIB"         // multipart part size in MiB; default 8
)

// FromEnv makes the Config of the store named by storeURL
// (s3://bucket/prefix) from the environment, read through getenv: the
// endpoint from AWS_ENDPOINT_URL_S3 or AWS_ENDPOINT_URL (required), the
// region from AWS_REGION, the keys from AWS_ACCESS_KEY_ID and
// AWS_SECRET_ACCESS_KEY (and AWS_SESSION_TOKEN), else from the
// credentials file AWS_SHARED_CREDENTIALS_FILE (default
// ~/.aws/credentials; INI, section AWS_PROFILE or "default", keys
// aws_access_key_id, aws_secret_access_key, aws_session_token), and the
// part size from FLOWCAT_S3_PART_MIB. Errors name the variable or file
// at fault and never print a secret.
func FromEnv(storeURL string, getenv func(string) string) (Config, error) {
	bucket, prefix, err := ParseURL(storeURL)
	if err != nil {
		return Config{}, err
	}
	cfg := Config{Bucket: bucket, Prefix: prefix, Region: getenv(EnvRegion)}
	cfg.Endpoint = getenv(EnvEndpointS3)
	if cfg.Endpoint == "" {
		cfg.Endpoint = getenv(EnvEndpoint)
	}
	if cfg.Endpoint == "" {
		return Config{}, fmt.Errorf("blob store %s: no endpoint: set %s (or %s) to the server's URL, e.g. https://s3.example.org", storeURL, EnvEndpointS3, EnvEndpoint)
	}
	if v := getenv(EnvPartSizeMiB); v != "" {
		n, err := strconv.Atoi(v)
		if err != nil || n < MinPartSize>>20 || n > 5<<10 {
			return Config{}, fmt.Errorf("blob store %s: %s=%q: want a whole number of MiB from 5 to 5120 (the S3 part limits)", storeURL, EnvPartSizeMiB, v)
		}
		cfg.PartSize = int64(n) << 20
	}
	id, secret := getenv(EnvAccessKey), getenv(EnvSecretKey)
	switch {
	case id != "" && secret != "":
		cfg.Credentials = credentials.NewStaticV4(id, secret, getenv(EnvSessionTok))
		return cfg, nil
	case id != "" || secret != "":
		return Config{}, fmt.Errorf("blob store %s: set both %s and %s, or neither (then a credentials file is read)", storeURL, EnvAccessKey, EnvSecretKey)
	}
	file := getenv(EnvCredsFile)
	if file == "" {
		home, err := os.UserHomeDir()
		if err != nil {
			return Config{}, fmt.Errorf("blob store %s: no credentials: set %s and %s, or %s", storeURL, EnvAccessKey, EnvSecretKey, EnvCredsFile)
		}
		file = filepath.Join(home, ".aws", "credentials")
	}
	profile := getenv(EnvProfile)
	if profile == "" {
		profile = "default"
	}
	if _, err := os.Stat(file); err != nil {
		return Config{}, fmt.Errorf("blob store %s: no credentials: set %s and %s, or give a credentials file (%s; %s: %v)", storeURL, EnvAccessKey, EnvSecretKey, EnvCredsFile, file, err)
	}
	creds := credentials.NewFileAWSCredentials(file, profile)
	v, err := creds.GetWithContext(nil)
	if err != nil {
		return Config{}, fmt.Errorf("blob store %s: credentials file %s, profile %s: %v", storeURL, file, profile, err)
	}
	if v.AccessKeyID == "" || v.SecretAccessKey == "" {
		return Config{}, fmt.Errorf("blob store %s: credentials file %s, profile %s: no aws_access_key_id and aws_secret_access_key", storeURL, file, profile)
	}
	cfg.Credentials = creds
	return cfg, nil
}
